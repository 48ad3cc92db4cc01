namespace FedGrid.Audit.Attacks;

/// <summary>
/// Occupancy (home or away) from a reconstructed base load: home where the estimate exceeds the threshold of its
/// slot of day, thresholds calibrated on public reference data (<see cref="OccupancyThresholds.Calibrate"/>). The
/// prior-only guess says home wherever the public home probability of the slot of day is at least one half.
/// </summary>
public static class OccupancyAttack
{
    /// <summary>Occupancy guess from one base-load estimate.</summary>
    /// <param name="view">The attacker's view (thresholds).</param>
    /// <param name="baseLoad">Reconstructed base load.</param>
    /// <returns>The guess, or null when the view has no thresholds.</returns>
    public static OccupancyGuess? Infer(AttackerView view, Reconstruction baseLoad)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(baseLoad);
        if (view.OccupancyThresholdKw is not { } tau) return null;
        var home = new bool[view.SlotCount];
        for (int t = 0; t < home.Length; t++) home[t] = baseLoad.EstimateKw[t] > tau[t % view.SlotsPerDay];
        return new OccupancyGuess(baseLoad.Household, home);
    }

    /// <summary>The prior-only occupancy guess of one household.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="household">Household index.</param>
    /// <returns>The guess, or null when the view has no prior home probability.</returns>
    public static OccupancyGuess? PriorGuess(AttackerView view, int household)
    {
        ArgumentNullException.ThrowIfNull(view);
        if (view.PriorHomeProbability is not { } p) return null;
        var home = new bool[view.SlotCount];
        for (int t = 0; t < home.Length; t++) home[t] = p[t % view.SlotsPerDay] >= 0.5;
        return new OccupancyGuess(household, home);
    }
}
