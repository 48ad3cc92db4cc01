namespace FedGrid.Audit.Scoring;

/// <summary>Error of one estimate against the truth.</summary>
/// <param name="Rmse">Root-mean-square error, kW.</param>
/// <param name="RelativeRmse">RMSE over the RMS of the truth (NaN when the truth is all zero).</param>
/// <param name="RSquared">Coefficient of determination 1 − SSE/SST (NaN when the truth is constant).</param>
/// <param name="FractionWithin01Kw">Fraction of slots with |error| ≤ 0.1 kW.</param>
/// <param name="SumSquaredError">Σ error², kW² (for pooling).</param>
/// <param name="SumSquaredTruth">Σ truth², kW² (for pooling).</param>
/// <param name="Count">Slots scored.</param>
public sealed record ErrorMetrics(double Rmse, double RelativeRmse, double RSquared, double FractionWithin01Kw,
    double SumSquaredError, double SumSquaredTruth, int Count)
{
    /// <summary>Tolerance of <see cref="FractionWithin01Kw"/>, kW.</summary>
    public const double ToleranceKw = 0.1;

    /// <summary>Computes the metrics over slots where both values are finite.</summary>
    /// <param name="truth">True values, kW.</param>
    /// <param name="estimate">Estimates, kW.</param>
    /// <returns>The metrics.</returns>
    public static ErrorMetrics Compute(ReadOnlySpan<double> truth, ReadOnlySpan<double> estimate)
    {
        if (truth.Length != estimate.Length) throw new ArgumentException($"truth has {truth.Length} slots, estimate {estimate.Length}");
        double sse = 0, sst = 0, sum = 0;
        int n = 0, within = 0;
        for (int t = 0; t < truth.Length; t++)
        {
            if (!double.IsFinite(truth[t]) || !double.IsFinite(estimate[t])) continue;
            double e = estimate[t] - truth[t];
            sse += e * e;
            sst += truth[t] * truth[t];
            sum += truth[t];
            if (Math.Abs(e) <= ToleranceKw) within++;
            n++;
        }
        if (n == 0) return new ErrorMetrics(double.NaN, double.NaN, double.NaN, double.NaN, 0, 0, 0);
        double mean = sum / n;
        double ssTot = 0;
        for (int t = 0; t < truth.Length; t++)
            if (double.IsFinite(truth[t]) && double.IsFinite(estimate[t])) ssTot += (truth[t] - mean) * (truth[t] - mean);
        return new ErrorMetrics(Math.Sqrt(sse / n), sst > 0 ? Math.Sqrt(sse / sst) : double.NaN, ssTot > 0 ? 1 - sse / ssTot : double.NaN,
            within / (double)n, sse, sst, n);
    }

    /// <summary>attack RMSE / prior RMSE: near 0 fully exposed, near 1 or above no better than the prior (NaN when the prior is exact).</summary>
    /// <param name="attack">Attack error.</param>
    /// <param name="prior">Prior-only error.</param>
    /// <returns>The ratio.</returns>
    public static double ExposureRatio(ErrorMetrics attack, ErrorMetrics prior)
    {
        ArgumentNullException.ThrowIfNull(attack);
        ArgumentNullException.ThrowIfNull(prior);
        return prior.SumSquaredError > 0 ? Math.Sqrt(attack.SumSquaredError / prior.SumSquaredError) : double.NaN;
    }
}

/// <summary>Scores of one channel × attack × quantity for one household.</summary>
/// <param name="Household">Household index.</param>
/// <param name="HouseholdId">Household id.</param>
/// <param name="Channel">Channel.</param>
/// <param name="Attack">Attack.</param>
/// <param name="Quantity">Quantity.</param>
/// <param name="Attacked">Attack error.</param>
/// <param name="Prior">Error of the prior-only guess.</param>
/// <param name="ExposureRatio">Attacked RMSE / prior RMSE.</param>
public sealed record HouseholdScore(int Household, string HouseholdId, Channel Channel, string Attack, Quantity Quantity,
    ErrorMetrics Attacked, ErrorMetrics Prior, double ExposureRatio);

/// <summary>One channel × attack × quantity pooled over households.</summary>
/// <param name="Channel">Channel.</param>
/// <param name="Attack">Attack.</param>
/// <param name="Quantity">Quantity.</param>
/// <param name="RelativeRmse">Pooled relative RMSE over all households: √(ΣSSE/Σtruth²).</param>
/// <param name="WorstHouseholdRelativeRmse">Relative RMSE of the most exposed household (the lowest).</param>
/// <param name="WorstHousehold">Id of that household.</param>
/// <param name="PriorRelativeRmse">Pooled relative RMSE of the prior-only guess.</param>
/// <param name="ExposureRatio">Pooled attack RMSE / prior RMSE.</param>
/// <param name="WorstHouseholdExposureRatio">Lowest per-household exposure ratio.</param>
/// <param name="Households">Households scored.</param>
public sealed record ChannelSummary(Channel Channel, string Attack, Quantity Quantity, double RelativeRmse, double WorstHouseholdRelativeRmse,
    string WorstHousehold, double PriorRelativeRmse, double ExposureRatio, double WorstHouseholdExposureRatio, int Households);

/// <summary>Trace of one household for the report's "true vs reconstructed" plot.</summary>
/// <param name="HouseholdId">Household id.</param>
/// <param name="TrueKw">True base load over the plotted window.</param>
/// <param name="ReconstructedKw">Joint reconstruction over the window.</param>
/// <param name="PriorKw">Prior mean over the window.</param>
/// <param name="ExposureRatio">Joint base-load exposure ratio of the household.</param>
public sealed record ExposedTrace(string HouseholdId, double[] TrueKw, double[] ReconstructedKw, double[] PriorKw, double ExposureRatio);

/// <summary>Everything the scoring step produced.</summary>
/// <param name="Summaries">Per channel × attack × quantity, pooled.</param>
/// <param name="Households">Per household scores.</param>
/// <param name="OccupancyAccuracy">Pooled accuracy of the occupancy attack (NaN without occupancy data).</param>
/// <param name="PriorOccupancyAccuracy">Pooled accuracy of the prior-only occupancy guess.</param>
/// <param name="HouseholdOccupancyAccuracy">Occupancy attack accuracy per household id.</param>
/// <param name="MostExposed">Traces of the most exposed households.</param>
public sealed record ScoreCard(IReadOnlyList<ChannelSummary> Summaries, IReadOnlyList<HouseholdScore> Households,
    double OccupancyAccuracy, double PriorOccupancyAccuracy, IReadOnlyDictionary<string, double> HouseholdOccupancyAccuracy,
    IReadOnlyList<ExposedTrace> MostExposed);
