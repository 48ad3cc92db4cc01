using FedGrid.Grid.Feeders;

namespace FedGrid.Grid.PowerFlow;

/// <summary>
/// Result of an AC power flow, in per unit, indexed by bus. Branch quantities are stored on the
/// child bus of each line (the line from <see cref="RadialNetwork.Parent"/>[i] to i); entries at
/// the slack bus describe the substation. Reusable: a solver overwrites it on each solve.
/// </summary>
public sealed class PowerFlowResult
{
    /// <summary>Allocates a result for a network of <paramref name="busCount"/> buses.</summary>
    public PowerFlowResult(int busCount)
    {
        VoltagePu = new double[busCount];
        AngleRad = new double[busCount];
        BranchPPu = new double[busCount];
        BranchQPu = new double[busCount];
        CurrentPu = new double[busCount];
    }

    /// <summary>Bus voltage magnitudes, per unit.</summary>
    public double[] VoltagePu { get; }

    /// <summary>Bus voltage angles relative to the slack, radians.</summary>
    public double[] AngleRad { get; }

    /// <summary>Real power entering each bus's parent line at its parent end, per unit; at the slack, the substation import.</summary>
    public double[] BranchPPu { get; }

    /// <summary>Reactive power entering each bus's parent line at its parent end, per unit; at the slack, the substation import.</summary>
    public double[] BranchQPu { get; }

    /// <summary>Current magnitude in each bus's parent line, per unit of that bus's current base; at the slack, the substation current.</summary>
    public double[] CurrentPu { get; }

    /// <summary>Total real loss in the lines, per unit.</summary>
    public double LossPu { get; private set; }

    /// <summary>Total reactive loss in the lines, per unit.</summary>
    public double ReactiveLossPu { get; private set; }

    /// <summary>Real power imported at the substation, per unit.</summary>
    public double SubstationPPu { get; private set; }

    /// <summary>Reactive power imported at the substation, per unit.</summary>
    public double SubstationQPu { get; private set; }

    /// <summary>Whether the sweep converged.</summary>
    public bool Converged { get; private set; }

    /// <summary>Sweeps performed.</summary>
    public int Iterations { get; private set; }

    /// <summary>Largest voltage change in the last sweep, per unit (the convergence measure).</summary>
    public double FinalMismatchPu { get; private set; }

    /// <summary>Index of the bus with the lowest voltage magnitude.</summary>
    public int MinVoltageBus { get; private set; }

    /// <summary>Lowest bus voltage magnitude, per unit.</summary>
    public double MinVoltagePu => VoltagePu[MinVoltageBus];

    internal void Fill(RadialNetwork net, double[] vr, double[] vi, double[] jr, double[] ji, bool converged, int iterations, double mismatch)
    {
        int n = net.BusCount;
        int[] parent = net.Parent;
        double loss = 0, qloss = 0;
        int minBus = 0;
        for (int i = 0; i < n; i++)
        {
            VoltagePu[i] = Math.Sqrt(vr[i] * vr[i] + vi[i] * vi[i]);
            AngleRad[i] = Math.Atan2(vi[i], vr[i]);
            double c2 = jr[i] * jr[i] + ji[i] * ji[i];
            CurrentPu[i] = Math.Sqrt(c2);
            int p = parent[i] < 0 ? i : parent[i];
            // S = V_parent · conj(J)
            BranchPPu[i] = vr[p] * jr[i] + vi[p] * ji[i];
            BranchQPu[i] = vi[p] * jr[i] - vr[p] * ji[i];
            if (parent[i] >= 0)
            {
                loss += net.R[i] * c2;
                qloss += net.X[i] * c2;
            }
            if (VoltagePu[i] < VoltagePu[minBus]) minBus = i;
        }
        int s = net.SlackIndex;
        LossPu = loss;
        ReactiveLossPu = qloss;
        SubstationPPu = BranchPPu[s];
        SubstationQPu = BranchQPu[s];
        Converged = converged;
        Iterations = iterations;
        FinalMismatchPu = mismatch;
        MinVoltageBus = minBus;
    }

    /// <summary>
    /// Every limit this operating point breaks by more than <paramref name="tolerancePu"/>:
    /// bus voltages outside their limits, line currents above ampacity, substation import above its limit.
    /// </summary>
    public IReadOnlyList<LimitViolation> FindViolations(Feeder feeder, double tolerancePu = 1e-6)
    {
        var list = new List<LimitViolation>();
        VisitViolations(feeder.Network, tolerancePu, (kind, bus) => list.Add(Describe(feeder, kind, bus)));
        return list;
    }

    /// <summary>
    /// How many limits <see cref="FindViolations"/> would list, counted without allocating
    /// (for per-slot use in long simulations).
    /// </summary>
    public int CountViolations(RadialNetwork network, double tolerancePu = 1e-6)
    {
        int count = 0;
        int n = network.BusCount;
        for (int i = 0; i < n; i++)
        {
            if (IsUnderVoltage(network, i, tolerancePu)) count++;
            if (IsOverVoltage(network, i, tolerancePu)) count++;
            if (IsOverCurrent(network, i, tolerancePu)) count++;
        }
        if (IsOverImport(network, tolerancePu)) count++;
        return count;
    }

    private void VisitViolations(RadialNetwork net, double tol, Action<ViolationKind, int> found)
    {
        for (int i = 0; i < net.BusCount; i++)
        {
            if (IsUnderVoltage(net, i, tol)) found(ViolationKind.UnderVoltage, i);
            if (IsOverVoltage(net, i, tol)) found(ViolationKind.OverVoltage, i);
            if (IsOverCurrent(net, i, tol)) found(ViolationKind.LineOverCurrent, i);
        }
        if (IsOverImport(net, tol)) found(ViolationKind.SubstationOverImport, net.SlackIndex);
    }

    private bool IsUnderVoltage(RadialNetwork net, int i, double tol) => VoltagePu[i] < net.VMinPu[i] - tol;

    private bool IsOverVoltage(RadialNetwork net, int i, double tol) => VoltagePu[i] > net.VMaxPu[i] + tol;

    private bool IsOverCurrent(RadialNetwork net, int i, double tol) =>
        net.Parent[i] >= 0 && CurrentPu[i] > net.CurrentLimitPu[i] * (1 + tol);

    private bool IsOverImport(RadialNetwork net, double tol) => SubstationPPu > net.ImportLimitPu + tol;

    private LimitViolation Describe(Feeder feeder, ViolationKind kind, int i)
    {
        var net = feeder.Network;
        switch (kind)
        {
            case ViolationKind.UnderVoltage:
                return new LimitViolation(kind, feeder.Buses[i].Id, VoltagePu[i], net.VMinPu[i], "pu");
            case ViolationKind.OverVoltage:
                return new LimitViolation(kind, feeder.Buses[i].Id, VoltagePu[i], net.VMaxPu[i], "pu");
            case ViolationKind.LineOverCurrent:
                Line line = feeder.Lines[net.ParentLine[i]];
                return new LimitViolation(kind, $"{line.From}-{line.To}", CurrentPu[i] * net.CurrentBaseA[i], line.AmpacityA, "A");
            default:
                return new LimitViolation(kind, feeder.Substation.SlackBus, net.ToKw(SubstationPPu), feeder.Substation.ImportLimitKw, "kW");
        }
    }
}

/// <summary>Kinds of operating limit.</summary>
public enum ViolationKind
{
    /// <summary>Bus voltage below its lower limit.</summary>
    UnderVoltage,
    /// <summary>Bus voltage above its upper limit.</summary>
    OverVoltage,
    /// <summary>Line current above ampacity.</summary>
    LineOverCurrent,
    /// <summary>Substation real-power import above its limit.</summary>
    SubstationOverImport,
}

/// <summary>One broken limit.</summary>
/// <param name="Kind">Which limit.</param>
/// <param name="Element">Bus id, line ("from-to") or substation bus id.</param>
/// <param name="Value">The value found, in <paramref name="Unit"/>.</param>
/// <param name="Limit">The limit, in <paramref name="Unit"/>.</param>
/// <param name="Unit">"pu", "A" or "kW".</param>
public sealed record LimitViolation(ViolationKind Kind, string Element, double Value, double Limit, string Unit);
