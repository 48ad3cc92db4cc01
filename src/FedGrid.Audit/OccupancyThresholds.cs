namespace FedGrid.Audit;

/// <summary>
/// Calibration of the occupancy rule on public reference data (households that are not part of the run, e.g. a
/// published load-profile sample): for each slot of day, the base-load threshold that classifies the reference
/// data best ("home" above it), including "always home" (−∞).
/// </summary>
public static class OccupancyThresholds
{
    /// <summary>Calibrates per-slot-of-day thresholds and the home probability.</summary>
    /// <param name="baseKw">Reference base loads, one array per reference household.</param>
    /// <param name="occupied">Reference occupancy, same shape.</param>
    /// <param name="slotsPerDay">Slots per day.</param>
    /// <returns>Thresholds (kW) and home probability, each of length <paramref name="slotsPerDay"/>.</returns>
    public static (double[] ThresholdKw, double[] HomeProbability) Calibrate(IReadOnlyList<double[]> baseKw, IReadOnlyList<bool[]> occupied, int slotsPerDay)
    {
        ArgumentNullException.ThrowIfNull(baseKw);
        ArgumentNullException.ThrowIfNull(occupied);
        if (baseKw.Count != occupied.Count) throw new ArgumentException("one occupancy series per base-load series");
        var tau = new double[slotsPerDay];
        var prob = new double[slotsPerDay];
        var samples = new List<(double Kw, bool Home)>();
        for (int s = 0; s < slotsPerDay; s++)
        {
            samples.Clear();
            for (int k = 0; k < baseKw.Count; k++)
            {
                if (baseKw[k].Length != occupied[k].Length) throw new ArgumentException($"reference household {k}: base load and occupancy differ in length");
                for (int t = s; t < baseKw[k].Length; t += slotsPerDay) samples.Add((baseKw[k][t], occupied[k][t]));
            }
            if (samples.Count == 0) { tau[s] = double.NegativeInfinity; prob[s] = 1; continue; }
            samples.Sort((a, b) => a.Kw.CompareTo(b.Kw));
            int homes = samples.Count(x => x.Home);
            prob[s] = homes / (double)samples.Count;
            // Threshold below sample i: samples 0..i−1 away, i.. home. Correct = aways below + homes at/above.
            int best = homes, bestI = 0, awayBelow = 0, homeBelow = 0;
            for (int i = 1; i <= samples.Count; i++)
            {
                if (samples[i - 1].Home) homeBelow++; else awayBelow++;
                if (i < samples.Count && samples[i].Kw == samples[i - 1].Kw) continue;
                int correct = awayBelow + (homes - homeBelow);
                if (correct > best) { best = correct; bestI = i; }
            }
            tau[s] = bestI == 0 ? double.NegativeInfinity
                   : bestI == samples.Count ? double.PositiveInfinity
                   : 0.5 * (samples[bestI - 1].Kw + samples[bestI].Kw);
        }
        return (tau, prob);
    }
}
