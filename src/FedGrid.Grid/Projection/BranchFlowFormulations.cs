using FedGrid.Grid.Feeders;
using FedGrid.Grid.Optimization;

namespace FedGrid.Grid.Projection;

/// <summary>
/// Second-order-cone relaxation of the branch flow model (Farivar &amp; Low, "Branch flow model:
/// relaxations and convexification", IEEE Trans. Power Systems 2013), the default formulation.
/// For each line i→j (i the parent), per unit, with p_j, q_j the net load at bus j:
/// <code>
///   P_ij = p_j + r_ij ℓ_ij + Σ_k P_jk,        Q_ij = q_j + x_ij ℓ_ij + Σ_k Q_jk,
///   v_j  = v_i − 2(r_ij P_ij + x_ij Q_ij) + (r_ij² + x_ij²) ℓ_ij,
///   ‖(2P_ij, 2Q_ij, ℓ_ij − v_i)‖ ≤ ℓ_ij + v_i        (relaxes ℓ_ij v_i = P_ij² + Q_ij²),
///   v_min² ≤ v_j ≤ v_max²,   ℓ_ij ≤ I_max²,   substation import ≤ its limit,
/// </code>
/// v the squared voltage magnitude and ℓ the squared current. The objective gets a small loss term
/// (weight × Σ r ℓ in kW), which makes the relaxation exact on radial feeders under mild conditions
/// and pins ℓ, which the distance objective alone leaves free. On a radial feeder this relaxation is
/// equivalent to the semidefinite relaxation (Bose, Low, Teeraratkul &amp; Hassibi 2015).
/// The program is written on a power base of 1 MVA whatever the feeder file's base (a rescaling
/// that leaves the equations unchanged and keeps distribution-feeder numbers of order one).
/// </summary>
public sealed class ConeRelaxationFormulation : IFeederFormulation
{
    /// <inheritdoc />
    public string Name => "cone";

    /// <inheritdoc />
    public IFormulatedFeeder Formulate(RadialNetwork network, ConeProgramBuilder builder, IReadOnlyList<UnitInjection>[] unitsAtBus, double lossWeightPerKw) =>
        new BranchFlowModel(network, builder, unitsAtBus, withLosses: true, lossWeightPerKw);
}

/// <summary>
/// Linearised branch flow model ("LinDistFlow", Baran &amp; Wu 1989): the branch flow equations
/// without the loss terms, so voltages are linear in the injections —
/// <code>
///   P_ij = p_j + Σ_k P_jk,   Q_ij = q_j + Σ_k Q_jk,   v_j = v_i − 2(r_ij P_ij + x_ij Q_ij),
/// </code>
/// with the current limit as the cone ‖(P_ij, Q_ij)‖ ≤ I_max · v_min,i (|S| = |V||I| and
/// |V_i| ≥ v_min,i, a conservative reading). Fast and approximate: it ignores losses, so the exact
/// AC check usually finds a small residual violation that the projector's tightening removes.
/// </summary>
public sealed class LinearisedBranchFlowFormulation : IFeederFormulation
{
    /// <inheritdoc />
    public string Name => "linear";

    /// <inheritdoc />
    public IFormulatedFeeder Formulate(RadialNetwork network, ConeProgramBuilder builder, IReadOnlyList<UnitInjection>[] unitsAtBus, double lossWeightPerKw) =>
        new BranchFlowModel(network, builder, unitsAtBus, withLosses: false, lossWeightPerKw);
}

/// <summary>The branch flow model with or without the loss terms and the cone (one code path for both formulations).</summary>
internal sealed class BranchFlowModel : IFormulatedFeeder
{
    private readonly RadialNetwork _net;
    private readonly bool _losses;
    private readonly Variable[] _pv, _qv, _lv, _vv;
    private readonly int[] _pBal, _qBal, _vLow, _vUp, _lUp, _curCone;
    private readonly int _slackRow, _importRow;
    private readonly Dictionary<int, (string Kind, int Bus)> _rowNames = [];
    private double _importLimitPu, _baseSlackP;
    // The program works on its own power base of 1 MVA, whatever the feeder file's base: k = S_file / S_int.
    // Powers scale by k, impedances by 1/k, squared currents by k², squared voltages not at all — the
    // equations are unchanged, and the numbers stay of order one for distribution feeders.
    private const double InternalBaseMva = 1.0;
    private readonly double _k;

    public BranchFlowModel(RadialNetwork net, ConeProgramBuilder b, IReadOnlyList<UnitInjection>[] unitsAtBus, bool withLosses, double lossWeightPerKw)
    {
        _net = net;
        _losses = withLosses;
        _k = net.BaseMva / InternalBaseMva;
        double kb = _k;
        int n = net.BusCount, slack = net.SlackIndex;
        _pv = new Variable[n]; _qv = new Variable[n]; _lv = new Variable[n]; _vv = new Variable[n];
        _pBal = new int[n]; _qBal = new int[n]; _vLow = new int[n]; _vUp = new int[n]; _lUp = new int[n]; _curCone = new int[n];
        Array.Fill(_pBal, -1); Array.Fill(_qBal, -1); Array.Fill(_vLow, -1); Array.Fill(_vUp, -1); Array.Fill(_lUp, -1); Array.Fill(_curCone, -1);
        var children = new List<int>[n];
        for (int i = 0; i < n; i++) children[i] = [];
        for (int i = 0; i < n; i++) if (net.Parent[i] >= 0) children[net.Parent[i]].Add(i);

        // Variables in breadth-first order (numbering does not matter to the solver's ordering).
        foreach (int j in net.Order)
        {
            if (j == slack)
            {
                _vv[j] = b.AddVariable($"v[{j}]");
                continue;
            }
            _pv[j] = b.AddVariable($"P[{j}]");
            _qv[j] = b.AddVariable($"Q[{j}]");
            if (withLosses) _lv[j] = b.AddVariable($"l[{j}]", upper: 1);
            _vv[j] = b.AddVariable($"v[{j}]", 0.81, 1.21);
            _vLow[j] = b.LowerBoundRow(_vv[j]);
            _vUp[j] = b.UpperBoundRow(_vv[j]);
            _rowNames[_vLow[j]] = ("voltage lower limit", j);
            _rowNames[_vUp[j]] = ("voltage upper limit", j);
            if (withLosses)
            {
                _lUp[j] = b.UpperBoundRow(_lv[j]);
                _rowNames[_lUp[j]] = ("current limit", j);
            }
        }
        _slackRow = b.AddEquality(LinearExpression.Of(_vv[slack]), net.SlackVoltagePu * net.SlackVoltagePu);
        double kwPerPu = 1000 * InternalBaseMva;
        foreach (int j in net.Order)
        {
            if (j == slack) continue;
            int i = net.Parent[j];
            double r = net.R[j] / kb, x = net.X[j] / kb;
            // P_ij − r ℓ − Σ_k P_jk − Σ_u c_u p_u = p_base,j   (and Q likewise)
            var pe = LinearExpression.Of(_pv[j]);
            var qe = LinearExpression.Of(_qv[j]);
            if (withLosses)
            {
                pe.Add(_lv[j], -r);
                qe.Add(_lv[j], -x);
            }
            foreach (int k in children[j])
            {
                pe.Add(_pv[k], -1);
                qe.Add(_qv[k], -1);
            }
            foreach (var u in unitsAtBus[j])
            {
                pe.Add(u.Setpoint, -u.PPuPerKw * kb);
                qe.Add(u.Setpoint, -u.QPuPerKw * kb);
            }
            _pBal[j] = b.AddEquality(pe, 0);
            _qBal[j] = b.AddEquality(qe, 0);
            // v_j − v_i + 2(r P + x Q) − (r² + x²) ℓ = 0
            var ve = LinearExpression.Of(_vv[j]).Add(_vv[i], -1).Add(_pv[j], 2 * r).Add(_qv[j], 2 * x);
            if (withLosses) ve.Add(_lv[j], -(r * r + x * x));
            b.AddEquality(ve, 0);
            if (withLosses)
            {
                b.AddSecondOrderCone(LinearExpression.Of(_lv[j]).Add(_vv[i]),
                    LinearExpression.Of(_pv[j], 2), LinearExpression.Of(_qv[j], 2), LinearExpression.Of(_lv[j]).Add(_vv[i], -1));
                if (lossWeightPerKw > 0) b.AddObjectiveLinear(_lv[j], lossWeightPerKw * r * kwPerPu);
            }
            else
                _curCone[j] = b.AddSecondOrderCone(LinearExpression.OfConstant(1), LinearExpression.Of(_pv[j]), LinearExpression.Of(_qv[j]));
        }
        // Substation import: Σ_{children of slack} P + Σ_{units at slack} c p ≤ limit − p_base,slack
        var imp = new LinearExpression();
        foreach (int k in children[slack]) imp.Add(_pv[k]);
        foreach (var u in unitsAtBus[slack]) imp.Add(u.Setpoint, u.PPuPerKw * kb);
        _importRow = b.AddLessOrEqual(imp, 1);
        _rowNames[_importRow] = ("substation import limit", slack);
    }

    public void SetBaseLoad(ConeProgram program, ReadOnlySpan<double> basePPu, ReadOnlySpan<double> baseQPu)
    {
        var bv = program.B;
        for (int j = 0; j < _net.BusCount; j++)
        {
            if (_pBal[j] < 0) continue;
            bv[_pBal[j]] = basePPu[j] * _k;
            bv[_qBal[j]] = baseQPu[j] * _k;
        }
        _baseSlackP = basePPu[_net.SlackIndex] * _k;
        program.H[_importRow] = _importLimitPu - _baseSlackP;
    }

    public void SetLimits(ConeProgram program, FeederLimits limits, ReadOnlySpan<double> basePPu)
    {
        var h = program.H;
        var net = _net;
        double k = _k;
        for (int j = 0; j < net.BusCount; j++)
        {
            if (_vLow[j] < 0) continue;
            h[_vLow[j]] = -limits.VMinPu[j] * limits.VMinPu[j];
            h[_vUp[j]] = limits.VMaxPu[j] * limits.VMaxPu[j];
            double imax = Math.Max(limits.CurrentLimitPu[j], 0) * k;
            if (_losses) h[_lUp[j]] = imax * imax;
            else h[program.SecondOrderRowStart(_curCone[j])] = imax * limits.VMinPu[net.Parent[j]];
        }
        _importLimitPu = limits.ImportLimitPu * k;
        _baseSlackP = basePPu[net.SlackIndex] * k;
        h[_importRow] = _importLimitPu - _baseSlackP;
        program.B[_slackRow] = net.SlackVoltagePu * net.SlackVoltagePu;
    }

    public void Recover(ReadOnlySpan<double> x, Span<double> voltagePu, Span<double> relaxationGapPu)
    {
        var net = _net;
        double k2 = _k * _k;
        for (int j = 0; j < net.BusCount; j++)
        {
            voltagePu[j] = Math.Sqrt(Math.Max(x[_vv[j].Index], 0));
            relaxationGapPu[j] = 0;
            if (!_losses || net.Parent[j] < 0) continue;
            double p = x[_pv[j].Index], q = x[_qv[j].Index], l = x[_lv[j].Index], vi = x[_vv[net.Parent[j]].Index];
            relaxationGapPu[j] = (l * vi - p * p - q * q) / k2;
        }
    }

    public string? DescribeRow(ConeProgram program, int coneRow, Feeder feeder)
    {
        if (_rowNames.TryGetValue(coneRow, out var name))
            return name.Kind == "current limit" ? $"{name.Kind} of line {LineName(feeder, name.Bus)}" : $"{name.Kind} at bus {feeder.Buses[name.Bus].Id}";
        if (_losses) return null;
        for (int j = 0; j < _net.BusCount; j++)
            if (_curCone[j] >= 0 && program.SecondOrderRowStart(_curCone[j]) == coneRow)
                return $"current limit of line {LineName(feeder, j)}";
        return null;
    }

    private string LineName(Feeder feeder, int bus)
    {
        var line = feeder.Lines[_net.ParentLine[bus]];
        return $"{line.From}-{line.To}";
    }
}
