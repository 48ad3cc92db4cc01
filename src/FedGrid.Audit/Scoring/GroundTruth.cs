namespace FedGrid.Audit.Scoring;

/// <summary>
/// The simulation's ground truth of a run (simulation-only: no deployment has it). It can be built by anyone but
/// read only inside the scoring step of this assembly: it has no public accessor, and no attack type takes it
/// (a test checks every attack type's signatures and method bodies).
/// </summary>
public sealed class GroundTruth
{
    private readonly Dictionary<Quantity, double[][]> _kw;
    private readonly bool[][]? _occupied;

    private GroundTruth(string[] ids, Dictionary<Quantity, double[][]> kw, bool[][]? occupied)
    {
        HouseholdIds = ids;
        _kw = kw;
        _occupied = occupied;
    }

    /// <summary>Household ids, in the order of the view.</summary>
    public IReadOnlyList<string> HouseholdIds { get; }

    /// <summary>Creates the ground truth from per-household series (copied).</summary>
    /// <param name="householdIds">Household ids in view order.</param>
    /// <param name="kw">By quantity, one kW series per household.</param>
    /// <param name="occupied">Occupancy per household and slot, or null.</param>
    /// <returns>The ground truth.</returns>
    public static GroundTruth FromSeries(IReadOnlyList<string> householdIds, IReadOnlyDictionary<Quantity, double[][]> kw, bool[][]? occupied)
    {
        ArgumentNullException.ThrowIfNull(householdIds);
        ArgumentNullException.ThrowIfNull(kw);
        var copy = new Dictionary<Quantity, double[][]>();
        foreach (var (q, series) in kw)
        {
            if (series.Length != householdIds.Count) throw new ArgumentException($"{AuditNames.Of(q)}: {series.Length} series for {householdIds.Count} households");
            copy[q] = series.Select(s => (double[])s.Clone()).ToArray();
        }
        if (occupied is not null && occupied.Length != householdIds.Count) throw new ArgumentException("one occupancy series per household");
        return new GroundTruth([.. householdIds], copy, occupied?.Select(o => (bool[])o.Clone()).ToArray());
    }

    internal bool Has(Quantity q) => _kw.ContainsKey(q);

    internal double[] Kw(Quantity q, int household) => _kw[q][household];

    internal bool[]? Occupied(int household) => _occupied?[household];
}
