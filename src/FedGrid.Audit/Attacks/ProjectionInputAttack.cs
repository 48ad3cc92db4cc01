namespace FedGrid.Audit.Attacks;

/// <summary>
/// Projection inputs. In the per-household form the coordinator is handed base load and flexible bounds outright;
/// in the bus-aggregate form it learns bus totals and infers each household's share as the Gaussian posterior mean
/// given the total and the public priors (the joint attack then fuses it with the other channels).
/// </summary>
public static class ProjectionInputAttack
{
    /// <summary>Attack name for the per-household form.</summary>
    public const string ReportedName = "reportedValues";

    /// <summary>Attack name for the bus-aggregate form.</summary>
    public const string BusShareName = "busTotalPriorShare";

    /// <summary>Runs the attack.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="reconstructions">Receives the reconstructions.</param>
    public static void Run(AttackerView view, AttackOptions options, List<Reconstruction> reconstructions)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(options);
        int T = view.SlotCount;
        for (int m = 0; m < view.Households.Count; m++)
        {
            HouseholdView h = view.Households[m];
            foreach (var (q, reported) in h.ReportedKw)
            {
                (double[] est, double[] var) = AttackPrior.Fallback(view, options, m, q);
                for (int t = 0; t < T; t++)
                    if (double.IsFinite(reported[t])) { est[t] = reported[t]; var[t] = AttackPrior.TinyVariance; }
                reconstructions.Add(new Reconstruction(Channel.ProjectionInputs, ReportedName, q, m, est, var));
            }
        }
        // Bus-aggregate form: the coordinator knows Σ_{k on bus} x_k(t). Under independent Gaussian priors x_k ~ N(μ_k, σ_k²)
        // the posterior of one household's share given the bus total is Gaussian with mean μ_m + σ_m²/Σσ_k² · (total − Σμ_k)
        // and variance σ_m² (1 − σ_m²/Σσ_k²); with one household on the bus the total is its value.
        int M = view.Households.Count;
        foreach (var (q, totals) in view.BusTotalsKw)
        {
            var means = new double[M][];
            var stds = new double[M];
            for (int k = 0; k < M; k++) { means[k] = AttackPrior.Mean(view, options, k, q); stds[k] = AttackPrior.Std(view, options, k, q); }
            for (int m = 0; m < M; m++)
            {
                int bus = view.Households[m].Bus;
                (double[] est, double[] var) = AttackPrior.Fallback(view, options, m, q);
                double sumVar = 0;
                for (int k = 0; k < M; k++)
                    if (view.Households[k].Bus == bus) sumVar += stds[k] * stds[k];
                double gain = stds[m] * stds[m] / sumVar;
                double posterior = Math.Max(AttackPrior.TinyVariance, stds[m] * stds[m] * (1 - gain));
                for (int t = 0; t < T; t++)
                {
                    double total = totals[bus * T + t];
                    if (!double.IsFinite(total)) continue;
                    double sumMean = 0;
                    for (int k = 0; k < M; k++)
                        if (view.Households[k].Bus == bus) sumMean += means[k][t];
                    est[t] = means[m][t] + gain * (total - sumMean);
                    var[t] = posterior;
                }
                reconstructions.Add(new Reconstruction(Channel.ProjectionInputs, BusShareName, q, m, est, var));
            }
        }
    }
}
