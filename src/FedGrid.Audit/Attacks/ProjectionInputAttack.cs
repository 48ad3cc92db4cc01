namespace FedGrid.Audit.Attacks;

/// <summary>
/// Projection inputs. In the per-household form the coordinator is handed base load and flexible bounds outright;
/// in the bus-aggregate form it learns bus totals and splits them among the bus's households in proportion to
/// their prior means (equal shares without priors).
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
        foreach (var (q, totals) in view.BusTotalsKw)
            for (int m = 0; m < view.Households.Count; m++)
            {
                int bus = view.Households[m].Bus;
                (double[] est, double[] var) = AttackPrior.Fallback(view, options, m, q);
                double sp = AttackPrior.Std(view, options, m, q);
                double[] mine = AttackPrior.Mean(view, options, m, q);
                int count = view.Households.Count(x => x.Bus == bus);
                for (int t = 0; t < T; t++)
                {
                    double total = totals[bus * T + t];
                    if (!double.IsFinite(total)) continue;
                    double sum = 0;
                    for (int k = 0; k < view.Households.Count; k++)
                        if (view.Households[k].Bus == bus) sum += Math.Max(0, AttackPrior.Mean(view, options, k, q)[t]);
                    est[t] = sum > 0 ? total * Math.Max(0, mine[t]) / sum : total / count;
                    var[t] = count == 1 ? AttackPrior.TinyVariance : sp * sp * (count - 1) / count;
                }
                reconstructions.Add(new Reconstruction(Channel.ProjectionInputs, BusShareName, q, m, est, var));
            }
    }
}
