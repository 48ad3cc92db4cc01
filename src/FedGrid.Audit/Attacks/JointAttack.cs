namespace FedGrid.Audit.Attacks;

/// <summary>
/// Joint: all channels combined. Per household, quantity and slot, the estimates of every channel are fused by
/// inverse-variance weighting using each attack's own variance (no ground truth involved), together with the prior.
/// </summary>
public static class JointAttack
{
    /// <summary>Attack name in results.</summary>
    public const string Name = "inverseVarianceFusion";

    /// <summary>Fuses <paramref name="reconstructions"/> (joint ones ignored) into one joint reconstruction per household and quantity.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="reconstructions">Channel reconstructions.</param>
    /// <returns>The joint reconstructions.</returns>
    public static List<Reconstruction> Fuse(AttackerView view, AttackOptions options, IReadOnlyList<Reconstruction> reconstructions)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(options);
        ArgumentNullException.ThrowIfNull(reconstructions);
        int T = view.SlotCount;
        var result = new List<Reconstruction>();
        for (int m = 0; m < view.Households.Count; m++)
            foreach (Quantity q in AuditNames.Quantities)
            {
                if (view.FeatureIndex(q) < 0 && !reconstructions.Any(r => r.Household == m && r.Quantity == q)) continue;
                (double[] pm, double[] pv) = AttackPrior.Fallback(view, options, m, q);
                var sumW = new double[T];
                var sumWx = new double[T];
                for (int t = 0; t < T; t++) { sumW[t] = 1 / pv[t]; sumWx[t] = pm[t] / pv[t]; }
                foreach (Reconstruction r in reconstructions)
                {
                    if (r.Household != m || r.Quantity != q || r.Channel == Channel.Joint) continue;
                    for (int t = 0; t < T; t++)
                    {
                        double w = 1 / Math.Max(r.VarianceKw2[t], AttackPrior.TinyVariance);
                        sumW[t] += w;
                        sumWx[t] += w * r.EstimateKw[t];
                    }
                }
                var est = new double[T];
                var var = new double[T];
                for (int t = 0; t < T; t++) { est[t] = sumWx[t] / sumW[t]; var[t] = 1 / sumW[t]; }
                result.Add(new Reconstruction(Channel.Joint, Name, q, m, est, var));
            }
        return result;
    }
}
