namespace FedGrid.Audit.Attacks;

/// <summary>
/// The physical floor: what the operator's bus meters reveal with no message at all. Each bus's metered
/// consumption is split among its households by prior total shares, and each share's base-load part taken in
/// proportion to the prior base load over the prior total.
/// </summary>
public static class PhysicalFloorAttack
{
    /// <summary>Attack name in results.</summary>
    public const string Name = "busMeterPriorShare";

    /// <summary>Runs the attack when the view has bus meters.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="reconstructions">Receives base-load reconstructions.</param>
    /// <param name="notes">Receives what could not be done.</param>
    public static void Run(AttackerView view, AttackOptions options, List<Reconstruction> reconstructions, List<string> notes)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(options);
        if (view.BusMeterKw is not { } meter)
        {
            notes.Add("physical floor: no bus meter readings in the view");
            return;
        }
        int T = view.SlotCount, H = view.Households.Count;
        var busTotalPrior = new double[view.BusIds.Count * T];
        for (int k = 0; k < H; k++)
        {
            double[] tot = AttackPrior.Total(view, options, k);
            int b = view.Households[k].Bus;
            for (int t = 0; t < T; t++) busTotalPrior[b * T + t] += Math.Max(0, tot[t]);
        }
        for (int m = 0; m < H; m++)
        {
            int b = view.Households[m].Bus;
            (double[] est, double[] var) = AttackPrior.Fallback(view, options, m, Quantity.BaseLoad);
            double[] tot = AttackPrior.Total(view, options, m);
            double[] basePrior = AttackPrior.Mean(view, options, m, Quantity.BaseLoad);
            for (int t = 0; t < T; t++)
            {
                double sum = busTotalPrior[b * T + t];
                if (!(sum > 0) || !double.IsFinite(meter[b * T + t])) continue;
                double share = meter[b * T + t] * Math.Max(0, tot[t]) / sum;
                double baseFraction = options.UsePriors && tot[t] > 0 ? Math.Clamp(basePrior[t] / tot[t], 0, 1) : 0.5;
                est[t] = share * baseFraction;
            }
            reconstructions.Add(new Reconstruction(Channel.PhysicalFloor, Name, Quantity.BaseLoad, m, est, var));
        }
    }
}
