namespace FedGrid.Bench.Versus;

/// <summary>
/// One case of the side-by-side comparison against an outside reference implementation
/// (SciPy, CVXOPT) run in the same process run: our code and the reference solve the same
/// instance, repeatedly, and the case reports both medians and the agreement.
/// </summary>
internal interface IVersusCase
{
    /// <summary>Case name as printed, e.g. "powerflow-33".</summary>
    string Name { get; }

    /// <summary>Runs our code and the reference <paramref name="repetitions"/> times each.</summary>
    VersusResult Run(int repetitions);
}

/// <summary>Outcome of one side-by-side case. Null reference figures mean no reference could solve it in reasonable time.</summary>
/// <param name="Case">Case name.</param>
/// <param name="OursMedianMs">Median wall time of our solve, ms.</param>
/// <param name="ReferenceMedianMs">Median wall time of the reference's solve (measured inside the reference process, excluding start-up), ms.</param>
/// <param name="MaxObjectiveRelDiff">Largest relative difference of the objective (or the case's main figure) between ours and the reference.</param>
/// <param name="Extra">Further case-specific figures (e.g. largest voltage difference in pu).</param>
internal sealed record VersusResult(string Case, double OursMedianMs, double? ReferenceMedianMs, double? MaxObjectiveRelDiff,
    IReadOnlyDictionary<string, double>? Extra = null)
{
    /// <summary>Reference median over ours.</summary>
    public double? Speedup => ReferenceMedianMs is { } r && OursMedianMs > 0 ? r / OursMedianMs : null;
}
