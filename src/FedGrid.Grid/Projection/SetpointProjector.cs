using System.Diagnostics;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.Optimization;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Grid.Projection;

/// <summary>
/// The safety projection: turns proposed flexible setpoints into the nearest setpoints the feeder
/// can carry. The problem is written once here —
/// <code>
///   minimise Σ_u w_u (p_u − proposal_u)²   subject to   min_u ≤ p_u ≤ max_u,  q_u = p_u tan φ_u,
///            and the feeder's physics and limits as modelled by the formulation,
/// </code>
/// with p_u in kW — and the feeder's physics comes from a pluggable <see cref="IFeederFormulation"/>.
/// Every result is judged by the exact AC power flow: an already-feasible proposal is returned
/// unchanged without a solve; a projected point whose AC check still breaks a limit has that limit
/// tightened by the violation and is solved again (at most <see cref="ProjectionOptions.MaxAttempts"/>
/// solves), and otherwise comes back <see cref="ProjectionStatus.Unverified"/> with the violations.
/// <para>
/// Units are anything with a box at a bus, so the bus-aggregate scheme (one unit per bus, the sum
/// of that bus's households) uses this class unchanged. The cone program, its symbolic
/// factorisation and all buffers are built once in the constructor; <see cref="Project(ProjectionInput, ProjectionResult)"/>
/// rewrites only right-hand sides and the linear objective, and allocates nothing unless it has
/// violations or binding limits to report.
/// </para>
/// </summary>
public sealed class SetpointProjector
{
    private readonly Feeder _feeder;
    private readonly RadialNetwork _net;
    private readonly FlexibleUnit[] _units;
    private readonly int[] _unitBus;
    private readonly double[] _weight, _tanPhi;
    private readonly Variable[] _unitVar;
    private readonly int[] _lowRow, _upRow;
    private readonly IFormulatedFeeder _model;
    private readonly ConeProgram _program;
    private readonly InteriorPointSolver _solver;
    private readonly ProjectionOptions _options;
    private readonly AcPowerFlow _flow;
    private readonly FeederLimits _limits;
    private readonly double[] _baseP, _baseQ, _loadP, _loadQ, _setpoint;

    /// <summary>Builds the projection problem for a feeder and its flexible units.</summary>
    /// <exception cref="ArgumentException">A unit names an unknown bus, or has a non-finite tan φ or a non-positive weight, or two units share an id.</exception>
    public SetpointProjector(Feeder feeder, IReadOnlyList<FlexibleUnit> units, IFeederFormulation? formulation = null, ProjectionOptions? options = null)
    {
        _feeder = feeder;
        _net = feeder.Network;
        _options = options ?? ProjectionOptions.Default;
        Formulation = formulation ?? new ConeRelaxationFormulation();
        int n = _net.BusCount, m = units.Count;
        _units = units.ToArray();
        _unitBus = new int[m];
        _weight = new double[m];
        _tanPhi = new double[m];
        var seen = new HashSet<string>(StringComparer.Ordinal);
        for (int u = 0; u < m; u++)
        {
            var unit = _units[u] ?? throw new ArgumentException($"unit {u} is null");
            if (!seen.Add(unit.Id)) throw new ArgumentException($"unit id '{unit.Id}' appears twice (units {u} and an earlier one)");
            if (!feeder.TryGetIndex(unit.BusId, out _unitBus[u]))
                throw new ArgumentException($"unit '{unit.Id}' is connected to bus '{unit.BusId}', which feeder '{feeder.Name}' does not have");
            if (!double.IsFinite(unit.TanPhi) || Math.Abs(unit.TanPhi) > 10)
                throw new ArgumentException($"unit '{unit.Id}' at bus '{unit.BusId}': tan φ must be finite and at most 10 in magnitude, got {unit.TanPhi}");
            if (!(unit.Weight > 0) || !double.IsFinite(unit.Weight))
                throw new ArgumentException($"unit '{unit.Id}' at bus '{unit.BusId}': weight must be positive and finite, got {unit.Weight}");
            _weight[u] = unit.Weight;
            _tanPhi[u] = unit.TanPhi;
        }

        var b = new ConeProgramBuilder();
        _unitVar = new Variable[m];
        _lowRow = new int[m];
        _upRow = new int[m];
        var atBus = new List<UnitInjection>[n];
        for (int i = 0; i < n; i++) atBus[i] = [];
        double puPerKw = _net.ToPu(1);
        for (int u = 0; u < m; u++)
        {
            _unitVar[u] = b.AddVariable(_units[u].Id, 0, 1);
            _lowRow[u] = b.LowerBoundRow(_unitVar[u]);
            _upRow[u] = b.UpperBoundRow(_unitVar[u]);
            b.AddObjectiveSquaredDistance(_unitVar[u], _weight[u], 0);
            atBus[_unitBus[u]].Add(new UnitInjection(_unitVar[u], puPerKw, puPerKw * _tanPhi[u]));
        }
        _model = Formulation.Formulate(_net, b, atBus, _options.LossWeightPerKw);
        _program = b.Build();
        _solver = new InteriorPointSolver(_program, _options.Solver ?? ProjectionOptions.DefaultSolver);
        _flow = new AcPowerFlow(_net);
        _limits = new FeederLimits(_net);
        _baseP = new double[n];
        _baseQ = new double[n];
        _loadP = new double[n];
        _loadQ = new double[n];
        _setpoint = new double[m];
    }

    /// <summary>The feeder.</summary>
    public Feeder Feeder => _feeder;

    /// <summary>The flexible units, in input order.</summary>
    public IReadOnlyList<FlexibleUnit> Units => _units;

    /// <summary>The formulation of the feeder's physics.</summary>
    public IFeederFormulation Formulation { get; }

    /// <summary>The cone program; after <see cref="WriteProgram"/> or a projection it holds that slot's data (with any tightening of the last attempt).</summary>
    public ConeProgram Program => _program;

    /// <summary>The interior-point solver built for <see cref="Program"/>.</summary>
    public InteriorPointSolver Solver => _solver;

    /// <summary>Allocates a result sized for this feeder and these units.</summary>
    public ProjectionResult CreateResult() => new(_net.BusCount, _units.Length);

    /// <summary>Writes the state one projection leaves for the next (the cone solver's warm start), for a checkpoint.</summary>
    /// <param name="writer">Where to write.</param>
    public void WriteState(BinaryWriter writer) => _solver.WriteWarmStart(writer);

    /// <summary>Restores a state of <see cref="WriteState"/> of a projector of the same feeder and units.</summary>
    /// <param name="reader">Where to read.</param>
    public void ReadState(BinaryReader reader) => _solver.ReadWarmStart(reader);

    /// <summary>Projects one slot's proposal into a new result object.</summary>
    public ProjectionResult Project(ProjectionInput input)
    {
        var r = CreateResult();
        Project(input, r);
        return r;
    }

    /// <summary>
    /// Writes the projection problem of <paramref name="input"/> into <see cref="Program"/> with the
    /// feeder's own limits, without solving (for export and outside checks).
    /// </summary>
    public void WriteProgram(ProjectionInput input)
    {
        Validate(input);
        _limits.Reset(_net);
        WriteData(input);
    }

    /// <summary>Projects one slot's proposal, overwriting <paramref name="result"/>.</summary>
    /// <exception cref="ArgumentException">Wrong array lengths, non-finite values, negative or inverted boxes, or a proposal outside its box (the message names the unit or bus).</exception>
    public void Project(ProjectionInput input, ProjectionResult result)
    {
        long start = Stopwatch.GetTimestamp();
        Validate(input);
        int m = _units.Length, n = _net.BusCount;
        result.Violations = [];
        result.BindingLimits = [];
        result.Iterations = 0;
        result.Attempts = 0;
        result.SolveMs = 0;
        result.ConeObjective = double.NaN;
        result.MaxRelaxationGap = 0;
        result.FellBackToMinimum = false;
        result.SolverStatus = SolverStatus.Optimal;
        Array.Fill(result.VoltagePu, double.NaN);
        Array.Clear(result.RelaxationGapPu);

        // Exact AC check of the proposal.
        ReadBaseLoad(input);
        bool okBefore = AcCheck(input.ProposalKw, result.AcFlowBefore, out double vBefore);
        result.MaxVoltageViolationPuBefore = vBefore;
        input.ProposalKw.CopyTo(result.SetpointKw, 0);
        if (okBefore)
        {
            AcCheck(input.ProposalKw, result.AcFlow, out _);
            Finish(result, ProjectionStatus.AlreadyFeasible, input, start);
            result.AcVerified = true;
            result.MaxVoltageViolationPuAfter = vBefore;
            return;
        }

        _limits.Reset(_net);
        WriteData(input);
        bool havePoint = false;
        for (int attempt = 1; attempt <= _options.MaxAttempts; attempt++)
        {
            long t0 = Stopwatch.GetTimestamp();
            var sr = _solver.Solve();
            result.SolveMs += Stopwatch.GetElapsedTime(t0).TotalMilliseconds;
            result.Iterations += sr.Iterations;
            result.Attempts = attempt;
            result.SolverStatus = sr.Status;
            if (sr.Status == SolverStatus.PrimalInfeasible && !havePoint)
            {
                result.BindingLimits = BindingLimits();
                AcCheck(result.SetpointKw, result.AcFlow, out double v0);
                result.MaxVoltageViolationPuAfter = v0;
                result.AcVerified = false;
                Finish(result, ProjectionStatus.Infeasible, input, start);
                return;
            }
            if (sr.Status != SolverStatus.Optimal)
            {
                if (!havePoint)
                {
                    // No solution to trust: never let the overloading proposal go ahead when the
                    // lowest load the boxes allow (every unit at its minimum) passes the exact AC check.
                    input.MinKw.CopyTo(result.SetpointKw, 0);
                    bool minimumOk = AcCheck(result.SetpointKw, result.AcFlow, out double v1);
                    if (!minimumOk)
                    {
                        input.ProposalKw.CopyTo(result.SetpointKw, 0);
                        AcCheck(result.SetpointKw, result.AcFlow, out v1);
                    }
                    result.FellBackToMinimum = minimumOk;
                    result.MaxVoltageViolationPuAfter = v1;
                    result.AcVerified = minimumOk;
                    Finish(result, ProjectionStatus.SolverFailure, input, start);
                    return;
                }
                break; // keep the previous attempt's point; reported unverified below
            }
            havePoint = true;
            result.ConeObjective = sr.PrimalObjective;
            var x = _solver.X;
            for (int u = 0; u < m; u++)
                result.SetpointKw[u] = Math.Clamp(x[_unitVar[u].Index], input.MinKw[u], input.MaxKw[u]);
            _model.Recover(x, result.VoltagePu, result.RelaxationGapPu);
            double gap = 0;
            for (int i = 0; i < n; i++) gap = Math.Max(gap, Math.Abs(result.RelaxationGapPu[i]));
            result.MaxRelaxationGap = gap;
            bool ok = AcCheck(result.SetpointKw, result.AcFlow, out double vAfter);
            result.MaxVoltageViolationPuAfter = vAfter;
            if (ok)
            {
                result.AcVerified = true;
                Finish(result, ProjectionStatus.Projected, input, start);
                return;
            }
            if (attempt < _options.MaxAttempts && !Tighten(result.AcFlow)) break;
            _model.SetLimits(_program, _limits, _baseP);
        }
        result.AcVerified = false;
        result.Violations = result.AcFlow.FindViolations(_feeder, _options.VerificationTolerancePu);
        Finish(result, ProjectionStatus.Unverified, input, start);
    }

    private void Finish(ProjectionResult result, ProjectionStatus status, ProjectionInput input, long start)
    {
        result.Status = status;
        double obj = 0;
        for (int u = 0; u < _units.Length; u++)
        {
            double d = result.SetpointKw[u] - input.ProposalKw[u];
            obj += _weight[u] * d * d;
        }
        result.Objective = obj;
        result.TotalMs = Stopwatch.GetElapsedTime(start).TotalMilliseconds;
    }

    private void ReadBaseLoad(ProjectionInput input)
    {
        double puPerKw = _net.ToPu(1);
        for (int i = 0; i < _net.BusCount; i++)
        {
            _baseP[i] = input.BaseLoadKw[i] * puPerKw;
            _baseQ[i] = input.BaseLoadKvar[i] * puPerKw;
        }
    }

    private void WriteData(ProjectionInput input)
    {
        ReadBaseLoad(input);
        var q = _program.Q;
        var h = _program.H;
        double constant = 0;
        for (int u = 0; u < _units.Length; u++)
        {
            double w = _weight[u], prop = input.ProposalKw[u];
            q[_unitVar[u].Index] = -2 * w * prop;
            constant += w * prop * prop;
            h[_lowRow[u]] = -input.MinKw[u];
            h[_upRow[u]] = input.MaxKw[u];
        }
        _program.ObjectiveConstant = constant;
        _model.SetBaseLoad(_program, _baseP, _baseQ);
        _model.SetLimits(_program, _limits, _baseP);
    }

    /// <summary>AC power flow at the given setpoints; true when it converged and no limit is broken beyond tolerance.</summary>
    private bool AcCheck(ReadOnlySpan<double> setpointKw, PowerFlowResult flow, out double maxVoltageViolation)
    {
        int n = _net.BusCount;
        double puPerKw = _net.ToPu(1);
        for (int i = 0; i < n; i++)
        {
            _loadP[i] = _baseP[i];
            _loadQ[i] = _baseQ[i];
        }
        for (int u = 0; u < _units.Length; u++)
        {
            _loadP[_unitBus[u]] += setpointKw[u] * puPerKw;
            _loadQ[_unitBus[u]] += setpointKw[u] * puPerKw * _tanPhi[u];
        }
        bool converged = _flow.Solve(_loadP, _loadQ, flow);
        double tol = _options.VerificationTolerancePu, vmax = 0;
        bool ok = converged;
        for (int i = 0; i < n; i++)
        {
            double v = flow.VoltagePu[i];
            double viol = Math.Max(_net.VMinPu[i] - v, v - _net.VMaxPu[i]);
            if (viol > vmax) vmax = viol;
            if (viol > tol) ok = false;
            if (_net.Parent[i] >= 0 && flow.CurrentPu[i] > _net.CurrentLimitPu[i] * (1 + tol)) ok = false;
        }
        if (flow.SubstationPPu > _net.ImportLimitPu + tol) ok = false;
        maxVoltageViolation = converged ? vmax : double.PositiveInfinity;
        return ok;
    }

    /// <summary>Tightens each limit the AC flow breaks by its violation plus the margin; false if nothing could be tightened.</summary>
    private bool Tighten(PowerFlowResult flow)
    {
        if (!flow.Converged) return false;
        double tol = _options.VerificationTolerancePu, margin = _options.TighteningMarginPu;
        bool any = false;
        for (int i = 0; i < _net.BusCount; i++)
        {
            double v = flow.VoltagePu[i];
            if (_net.VMinPu[i] - v > tol) { _limits.VMinPu[i] += _net.VMinPu[i] - v + margin; any = true; }
            if (v - _net.VMaxPu[i] > tol) { _limits.VMaxPu[i] -= v - _net.VMaxPu[i] + margin; any = true; }
            if (_net.Parent[i] >= 0 && flow.CurrentPu[i] > _net.CurrentLimitPu[i] * (1 + tol))
            {
                _limits.CurrentLimitPu[i] -= flow.CurrentPu[i] - _net.CurrentLimitPu[i] + margin * _net.CurrentLimitPu[i];
                any = true;
            }
        }
        if (flow.SubstationPPu > _net.ImportLimitPu + tol)
        {
            _limits.ImportLimitPu -= flow.SubstationPPu - _net.ImportLimitPu + margin;
            any = true;
        }
        return any;
    }

    /// <summary>Feeder limits carrying weight in the solver's Farkas certificate.</summary>
    private IReadOnlyList<string> BindingLimits()
    {
        var z = _solver.Z;
        double zmax = 0;
        for (int i = 0; i < z.Length; i++) zmax = Math.Max(zmax, Math.Abs(z[i]));
        var names = new List<string>();
        int l = _program.Cones.Nonnegative;
        var unitRows = new HashSet<int>(_lowRow);
        int unitMins = 0;
        for (int i = 0; i < l; i++)
        {
            if (z[i] < 1e-3 * zmax) continue;
            if (unitRows.Contains(i)) { unitMins++; continue; }
            string? name = _model.DescribeRow(_program, i, _feeder);
            if (name is not null) names.Add(name);
        }
        for (int k = 0; k < _program.Cones.SecondOrderCount; k++)
        {
            int row = _program.SecondOrderRowStart(k);
            if (z[row] < 1e-3 * zmax) continue;
            string? name = _model.DescribeRow(_program, row, _feeder);
            if (name is not null) names.Add(name);
        }
        if (unitMins > 0) names.Add($"minimum setpoints of {unitMins} flexible unit(s)");
        return names;
    }

    private void Validate(ProjectionInput input)
    {
        int n = _net.BusCount, m = _units.Length;
        ArgumentNullException.ThrowIfNull(input);
        if (input.BaseLoadKw.Length != n || input.BaseLoadKvar.Length != n)
            throw new ArgumentException($"expected base loads for the {n} buses of feeder '{_feeder.Name}', got {input.BaseLoadKw.Length} kW and {input.BaseLoadKvar.Length} kvar values");
        if (input.MinKw.Length != m || input.MaxKw.Length != m || input.ProposalKw.Length != m)
            throw new ArgumentException($"expected {m} flexible units, got {input.MinKw.Length} minimums, {input.MaxKw.Length} maximums and {input.ProposalKw.Length} proposals");
        for (int i = 0; i < n; i++)
            if (!double.IsFinite(input.BaseLoadKw[i]) || !double.IsFinite(input.BaseLoadKvar[i]))
                throw new ArgumentException($"base load at bus '{_feeder.Buses[i].Id}' is not finite ({input.BaseLoadKw[i]} kW, {input.BaseLoadKvar[i]} kvar)");
        for (int u = 0; u < m; u++)
        {
            double lo = input.MinKw[u], hi = input.MaxKw[u], p = input.ProposalKw[u];
            if (!double.IsFinite(lo) || !double.IsFinite(hi) || !double.IsFinite(p))
                throw new ArgumentException($"unit '{_units[u].Id}' at bus '{_units[u].BusId}': minimum {lo} kW, maximum {hi} kW and proposal {p} kW must be finite numbers");
            if (lo < 0 || p < 0)
                throw new ArgumentException($"unit '{_units[u].Id}' at bus '{_units[u].BusId}': setpoints are consumption and must not be negative (minimum {lo} kW, proposal {p} kW)");
            if (hi < lo)
                throw new ArgumentException($"unit '{_units[u].Id}' at bus '{_units[u].BusId}': maximum {hi} kW is below minimum {lo} kW");
            double slack = 1e-9 * Math.Max(1, hi);
            if (p < lo - slack || p > hi + slack)
                throw new ArgumentException($"unit '{_units[u].Id}' at bus '{_units[u].BusId}': proposal {p} kW is outside its box [{lo}, {hi}] kW");
        }
    }
}
