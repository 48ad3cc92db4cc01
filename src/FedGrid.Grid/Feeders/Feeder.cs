namespace FedGrid.Grid.Feeders;

/// <summary>A bus of a distribution feeder, as written in a feeder file.</summary>
/// <param name="Id">Identifier used by lines and reports (unique in the feeder).</param>
/// <param name="Name">Human-readable name.</param>
/// <param name="BaseKv">Nominal line-to-line voltage in kV (the voltage base of the bus).</param>
/// <param name="LoadPkW">Fixed real load at the bus in kW (positive is consumption).</param>
/// <param name="LoadQkvar">Fixed reactive load at the bus in kvar.</param>
/// <param name="VMinPu">Lower voltage-magnitude limit in per unit.</param>
/// <param name="VMaxPu">Upper voltage-magnitude limit in per unit.</param>
public sealed record Bus(string Id, string Name, double BaseKv, double LoadPkW, double LoadQkvar, double VMinPu, double VMaxPu);

/// <summary>A line (branch) between two buses.</summary>
/// <param name="From">Id of one end (need not be the end nearer the substation).</param>
/// <param name="To">Id of the other end.</param>
/// <param name="ROhm">Series resistance in ohms.</param>
/// <param name="XOhm">Series reactance in ohms.</param>
/// <param name="AmpacityA">Current limit in amperes.</param>
public sealed record Line(string From, string To, double ROhm, double XOhm, double AmpacityA);

/// <summary>The substation: the slack bus of the feeder.</summary>
/// <param name="SlackBus">Id of the bus the substation transformer feeds.</param>
/// <param name="VoltageSetpointPu">Voltage magnitude held at the slack bus, per unit.</param>
/// <param name="ImportLimitKw">Largest real power the substation may import, kW.</param>
public sealed record Substation(string SlackBus, double VoltageSetpointPu, double ImportLimitKw);

/// <summary>
/// A validated radial feeder. Construct through <see cref="Create"/> (or a feeder file
/// reader), which checks the topology and orders the buses from the substation outward.
/// </summary>
public sealed class Feeder
{
    private readonly Dictionary<string, int> _indexById;

    private Feeder(string name, string? source, double baseMva, IReadOnlyList<Bus> buses, IReadOnlyList<Line> lines,
        Substation substation, RadialNetwork network, Dictionary<string, int> indexById, IReadOnlyList<string>? notes)
    {
        Name = name;
        Source = source;
        Notes = notes ?? [];
        BaseMva = baseMva;
        Buses = buses;
        Lines = lines;
        Substation = substation;
        Network = network;
        _indexById = indexById;
    }

    /// <summary>Feeder name.</summary>
    public string Name { get; }

    /// <summary>Where the data comes from (citation for published cases), if given.</summary>
    public string? Source { get; }

    /// <summary>Free-text remarks carried with the feeder (e.g. which values are assumptions rather than published data).</summary>
    public IReadOnlyList<string> Notes { get; }

    /// <summary>Three-phase power base in MVA for per-unit conversion.</summary>
    public double BaseMva { get; }

    /// <summary>Buses in file order.</summary>
    public IReadOnlyList<Bus> Buses { get; }

    /// <summary>Lines in file order.</summary>
    public IReadOnlyList<Line> Lines { get; }

    /// <summary>The substation (slack bus).</summary>
    public Substation Substation { get; }

    /// <summary>The per-unit radial network derived from buses, lines and substation.</summary>
    public RadialNetwork Network { get; }

    /// <summary>Index (in <see cref="Buses"/> order) of the bus with the given id.</summary>
    /// <exception cref="KeyNotFoundException">No such bus.</exception>
    public int IndexOf(string busId) =>
        _indexById.TryGetValue(busId, out int i) ? i : throw new KeyNotFoundException($"feeder '{Name}' has no bus '{busId}'");

    /// <summary>Tries to find the index of a bus.</summary>
    public bool TryGetIndex(string busId, out int index) => _indexById.TryGetValue(busId, out index);

    /// <summary>
    /// Builds a feeder after checking it. Throws <see cref="FeederValidationException"/> listing
    /// every problem found, each with a locator such as <c>$.lines[3].to</c>.
    /// </summary>
    public static Feeder Create(string name, IReadOnlyList<Bus> buses, IReadOnlyList<Line> lines, Substation substation,
        double baseMva = 1.0, string? source = null, string? fileName = null, IReadOnlyList<string>? notes = null) =>
        CreateChecked(name, buses, lines, substation, baseMva, source, fileName, notes);

    /// <summary>As <see cref="Create"/>, but a missing substation is reported as a validation problem.</summary>
    internal static Feeder CreateChecked(string name, IReadOnlyList<Bus> buses, IReadOnlyList<Line> lines, Substation? substation,
        double baseMva, string? source, string? fileName, IReadOnlyList<string>? notes) =>
        FeederValidator.Build(name, buses, lines, substation, baseMva, source, fileName,
            (net, index) => new Feeder(name, source, baseMva, buses, lines, substation!, net, index, notes));
}
