namespace FedGrid.Grid.Feeders;

/// <summary>
/// The per-unit view of a radial feeder that numerical code works on. Bus <c>i</c> is
/// indexed as in <see cref="Feeder.Buses"/>; every bus but the slack has exactly one parent
/// line (the line towards the substation), stored on the child: <see cref="R"/>[i] and
/// <see cref="X"/>[i] are the impedance of the line from <see cref="Parent"/>[i] to <c>i</c>.
/// Arrays are owned by this object; treat them as read-only.
/// </summary>
public sealed class RadialNetwork
{
    internal RadialNetwork(int slack, int[] order, int[] parent, int[] parentLine, double[] r, double[] x, double[] iMaxPu,
        double[] loadP, double[] loadQ, double[] vMin, double[] vMax, double[] baseKv, double[] iBaseA,
        double slackVoltagePu, double importLimitPu, double baseMva)
    {
        SlackIndex = slack;
        Order = order;
        Parent = parent;
        ParentLine = parentLine;
        R = r;
        X = x;
        CurrentLimitPu = iMaxPu;
        LoadP = loadP;
        LoadQ = loadQ;
        VMinPu = vMin;
        VMaxPu = vMax;
        BaseKv = baseKv;
        CurrentBaseA = iBaseA;
        SlackVoltagePu = slackVoltagePu;
        ImportLimitPu = importLimitPu;
        BaseMva = baseMva;
    }

    /// <summary>Number of buses.</summary>
    public int BusCount => Parent.Length;

    /// <summary>Index of the slack (substation) bus.</summary>
    public int SlackIndex { get; }

    /// <summary>Bus indices in breadth-first order from the slack: every parent before its children.</summary>
    public int[] Order { get; }

    /// <summary>Parent bus of each bus; -1 for the slack.</summary>
    public int[] Parent { get; }

    /// <summary>Index in <see cref="Feeder.Lines"/> of each bus's parent line; -1 for the slack.</summary>
    public int[] ParentLine { get; }

    /// <summary>Per-unit resistance of each bus's parent line (0 for the slack).</summary>
    public double[] R { get; }

    /// <summary>Per-unit reactance of each bus's parent line (0 for the slack).</summary>
    public double[] X { get; }

    /// <summary>Per-unit current limit of each bus's parent line (+∞ for the slack).</summary>
    public double[] CurrentLimitPu { get; }

    /// <summary>Per-unit fixed real load at each bus (from the feeder file).</summary>
    public double[] LoadP { get; }

    /// <summary>Per-unit fixed reactive load at each bus (from the feeder file).</summary>
    public double[] LoadQ { get; }

    /// <summary>Lower voltage limit of each bus, per unit.</summary>
    public double[] VMinPu { get; }

    /// <summary>Upper voltage limit of each bus, per unit.</summary>
    public double[] VMaxPu { get; }

    /// <summary>Nominal voltage of each bus, kV line to line.</summary>
    public double[] BaseKv { get; }

    /// <summary>Current base of each bus's voltage level, in amperes.</summary>
    public double[] CurrentBaseA { get; }

    /// <summary>Voltage magnitude held at the slack bus, per unit.</summary>
    public double SlackVoltagePu { get; }

    /// <summary>Substation import limit, per unit of <see cref="BaseMva"/>.</summary>
    public double ImportLimitPu { get; }

    /// <summary>Power base in MVA.</summary>
    public double BaseMva { get; }

    /// <summary>Converts kW (or kvar) to per unit of the power base.</summary>
    public double ToPu(double kw) => kw / (1000.0 * BaseMva);

    /// <summary>Converts per-unit power to kW (or kvar).</summary>
    public double ToKw(double pu) => pu * 1000.0 * BaseMva;
}
