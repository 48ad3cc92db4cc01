namespace FedGrid.Audit.Scoring;

/// <summary>The scoring step: compares attack results with the ground truth and with the prior-only guess.</summary>
public static class Scorer
{
    /// <summary>Scores every reconstruction.</summary>
    /// <param name="view">The view the attacks saw (for the prior-only guess and ids).</param>
    /// <param name="results">Attack results.</param>
    /// <param name="truth">Ground truth.</param>
    /// <param name="exposedTraces">How many of the most exposed households to keep traces of.</param>
    /// <param name="traceSlots">Length of the kept traces, slots (from slot 0).</param>
    /// <returns>The score card.</returns>
    public static ScoreCard Score(AttackerView view, AttackResults results, GroundTruth truth, int exposedTraces = 3, int traceSlots = 192)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(results);
        ArgumentNullException.ThrowIfNull(truth);
        if (truth.HouseholdIds.Count != view.Households.Count)
            throw new ArgumentException($"ground truth has {truth.HouseholdIds.Count} households, the view {view.Households.Count}");
        var scores = new List<HouseholdScore>();
        var priorCache = new Dictionary<(int, Quantity), ErrorMetrics>();
        foreach (Reconstruction r in results.Reconstructions)
        {
            if (!truth.Has(r.Quantity)) continue;
            double[] t = truth.Kw(r.Quantity, r.Household);
            ErrorMetrics a = ErrorMetrics.Compute(t, r.EstimateKw);
            if (!priorCache.TryGetValue((r.Household, r.Quantity), out ErrorMetrics? p))
            {
                double[] pm = view.Households[r.Household].Priors.TryGetValue(r.Quantity, out QuantityPrior? qp) ? qp.MeanKw : new double[t.Length];
                p = ErrorMetrics.Compute(t, pm);
                priorCache[(r.Household, r.Quantity)] = p;
            }
            scores.Add(new HouseholdScore(r.Household, view.Households[r.Household].Id, r.Channel, r.Attack, r.Quantity, a, p, ErrorMetrics.ExposureRatio(a, p)));
        }
        var summaries = new List<ChannelSummary>();
        foreach (var g in scores.GroupBy(s => (s.Channel, s.Attack, s.Quantity)))
        {
            double sse = g.Sum(s => s.Attacked.SumSquaredError), sst = g.Sum(s => s.Attacked.SumSquaredTruth);
            double psse = g.Sum(s => s.Prior.SumSquaredError);
            HouseholdScore? worst = g.Where(s => double.IsFinite(s.Attacked.RelativeRmse)).MinBy(s => s.Attacked.RelativeRmse);
            double worstRatio = g.Where(s => double.IsFinite(s.ExposureRatio)).Select(s => s.ExposureRatio).DefaultIfEmpty(double.NaN).Min();
            summaries.Add(new ChannelSummary(g.Key.Channel, g.Key.Attack, g.Key.Quantity,
                sst > 0 ? Math.Sqrt(sse / sst) : double.NaN, worst?.Attacked.RelativeRmse ?? double.NaN, worst?.HouseholdId ?? "",
                sst > 0 ? Math.Sqrt(psse / sst) : double.NaN, psse > 0 ? Math.Sqrt(sse / psse) : double.NaN, worstRatio, g.Count()));
        }
        summaries.Sort((a, b) => a.Channel != b.Channel ? a.Channel.CompareTo(b.Channel) : a.Quantity != b.Quantity ? a.Quantity.CompareTo(b.Quantity) : string.CompareOrdinal(a.Attack, b.Attack));

        // Occupancy.
        long right = 0, total = 0, pRight = 0, pTotal = 0;
        var perHousehold = new Dictionary<string, double>();
        foreach (OccupancyGuess g in results.Occupancy)
        {
            bool[]? occ = truth.Occupied(g.Household);
            if (occ is null) continue;
            int ok = 0;
            for (int t = 0; t < occ.Length; t++) if (g.Home[t] == occ[t]) ok++;
            right += ok; total += occ.Length;
            perHousehold[view.Households[g.Household].Id] = ok / (double)occ.Length;
        }
        foreach (OccupancyGuess g in results.PriorOccupancy)
        {
            bool[]? occ = truth.Occupied(g.Household);
            if (occ is null) continue;
            for (int t = 0; t < occ.Length; t++) if (g.Home[t] == occ[t]) pRight++;
            pTotal += occ.Length;
        }

        // Most exposed households: lowest joint base-load exposure ratio.
        var traces = new List<ExposedTrace>();
        if (truth.Has(Quantity.BaseLoad))
        {
            var joint = scores.Where(s => s.Channel == Channel.Joint && s.Quantity == Quantity.BaseLoad && double.IsFinite(s.ExposureRatio))
                              .OrderBy(s => s.ExposureRatio).Take(exposedTraces);
            foreach (HouseholdScore s in joint)
            {
                Reconstruction r = results.Reconstructions.First(x => x.Channel == Channel.Joint && x.Quantity == Quantity.BaseLoad && x.Household == s.Household);
                int len = Math.Min(traceSlots, view.SlotCount);
                double[] pm = view.Households[s.Household].Priors.TryGetValue(Quantity.BaseLoad, out QuantityPrior? qp) ? qp.MeanKw : new double[view.SlotCount];
                traces.Add(new ExposedTrace(s.HouseholdId, truth.Kw(Quantity.BaseLoad, s.Household)[..len], r.EstimateKw[..len], pm[..len], s.ExposureRatio));
            }
        }
        return new ScoreCard(summaries, scores, total > 0 ? right / (double)total : double.NaN, pTotal > 0 ? pRight / (double)pTotal : double.NaN, perHousehold, traces);
    }
}
