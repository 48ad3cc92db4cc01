using System.Collections.Immutable;
using FedGrid.Grid.Optimization;
using FedGrid.Grid.PowerFlow;
using FedGrid.Grid.Projection;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Households.Optimum;

/// <summary>The convex program of one window (see <see cref="PerfectForesightOptimum"/> for the mathematics).</summary>
internal sealed class WindowModel
{
    private const int Kinds = 3;
    private const double Dt = SlotCalendar.SlotHours;
    private readonly Scenario _sc;
    private readonly int _start, _len, _n;
    private readonly Variable?[] _var;          // [(k·n + m)·3 + kind]
    private readonly double[] _fixedKw;          // power of appliances without a variable, same layout
    private readonly IFormulatedFeeder[] _feeder;
    private readonly List<(int Index, double Coefficient)> _billTerms = [], _discTerms = [];
    private readonly double _billConstant, _discConstant;
    private readonly double[,] _basePKw, _baseQKw; // [k, bus] base loads incl. fixed appliance powers
    private readonly double[] _evStartKwh, _tankStartKwh;
    private readonly ChargingSession?[] _evCurrent;

    public ConeProgram Program { get; }

    public WindowModel(Scenario scenario, DemandResponseEnvironment env, int start, int len, double lossWeightPerKw)
    {
        _sc = scenario;
        _start = start;
        _len = len;
        _n = scenario.Households.Length;
        var feeder = scenario.Feeder;
        var net = feeder.Network;
        int buses = net.BusCount;
        _var = new Variable?[len * _n * Kinds];
        _fixedKw = new double[len * _n * Kinds];
        _basePKw = new double[len, buses];
        _baseQKw = new double[len, buses];
        _evStartKwh = env.DeferrableRemainingKwh.ToArray();
        _tankStartKwh = env.TankEnergyKwh.ToArray();
        _evCurrent = new ChargingSession?[_n];
        for (int m = 0; m < _n; m++) _evCurrent[m] = env.CurrentSession(m);
        var b = new ConeProgramBuilder();
        double billC = 0, discC = 0;

        for (int m = 0; m < _n; m++)
        {
            Household h = scenario.Households[m];
            HouseholdTrace tr = scenario.Traces[m];
            if (h.Deferrable is { } ev)
                foreach (var (e0, a, deadline) in Sessions(m))
                    discC += AddSession(b, m, ev, e0, a, deadline);
            if (h.Thermal is { } tank) AddTank(b, m, tank, tr);
            if (h.Curtailable is { } c)
                for (int k = 0; k < len; k++)
                {
                    double des = tr.CurtailableDesiredKw[start + k];
                    int at = Index(k, m, ApplianceKind.Curtailable);
                    if (des <= 0 || c.MinFraction >= 1) { _fixedKw[at] = c.MinKw(des); discC += c.Discomfort(des, c.MinKw(des)); continue; }
                    var p = b.AddVariable($"curt[{m},{k}]", c.MinKw(des), des);
                    _var[at] = p;
                    discC += c.ShortfallWeight * des * Dt;
                    Objective(b, _discTerms, p, -c.ShortfallWeight * Dt);
                }
        }

        // Bills and base loads, slot by slot; then the feeder of each slot through the cone relaxation.
        double pu = net.ToPu(1);
        _feeder = new IFormulatedFeeder[len];
        var formulation = new ConeRelaxationFormulation();
        for (int k = 0; k < len; k++)
        {
            int t = start + k;
            double price = scenario.Tariff.PriceAt(t);
            foreach (FixedBusLoad f in scenario.FixedLoads)
            {
                int bus = feeder.IndexOf(f.BusId);
                _basePKw[k, bus] += f.Kw;
                _baseQKw[k, bus] += f.Kvar;
            }
            var units = new List<UnitInjection>[buses];
            for (int j = 0; j < buses; j++) units[j] = [];
            for (int m = 0; m < _n; m++)
            {
                Household h = scenario.Households[m];
                int bus = feeder.IndexOf(h.BusId);
                double tan = h.KvarPerKw;
                double fixedKw = scenario.Traces[m].BaseKw[t];
                for (int a = 0; a < Kinds; a++)
                {
                    int at = (k * _n + m) * Kinds + a;
                    if (_var[at] is { } v)
                    {
                        units[bus].Add(new UnitInjection(v, pu, tan * pu));
                        Objective(b, _billTerms, v, price * Dt);
                    }
                    else fixedKw += _fixedKw[at];
                }
                _basePKw[k, bus] += fixedKw;
                _baseQKw[k, bus] += tan * fixedKw;
                billC += price * fixedKw * Dt;
            }
            _feeder[k] = formulation.Formulate(net, b, units, lossWeightPerKw);
        }
        _billConstant = billC;
        _discConstant = discC;
        b.AddObjectiveConstant(billC + discC);
        Program = b.Build();

        var limits = new FeederLimits(net);
        var baseP = new double[buses];
        var baseQ = new double[buses];
        for (int k = 0; k < len; k++)
        {
            for (int j = 0; j < buses; j++)
            {
                baseP[j] = net.ToPu(_basePKw[k, j]);
                baseQ[j] = net.ToPu(_baseQKw[k, j]);
            }
            _feeder[k].SetLimits(Program, limits, baseP);
            _feeder[k].SetBaseLoad(Program, baseP, baseQ);
        }
    }

    private int Index(int k, int m, ApplianceKind kind) => (k * _n + m) * Kinds + (int)kind;

    private static void Objective(ConeProgramBuilder b, List<(int, double)> terms, Variable v, double c)
    {
        b.AddObjectiveLinear(v, c);
        terms.Add((v.Index, c));
    }

    // Sessions touching the window: (energy still wanted at its first window slot, first window slot, deadline horizon slot).
    private IEnumerable<(double Energy, int First, int Deadline)> Sessions(int m)
    {
        if (_evCurrent[m] is { } cur) yield return (_evStartKwh[m], 0, cur.DeadlineSlot);
        foreach (ChargingSession s in _sc.Traces[m].Sessions)
            if (s.ArrivalSlot > _start && s.ArrivalSlot < _start + _len) yield return (s.EnergyKwh, s.ArrivalSlot - _start, s.DeadlineSlot);
    }

    // Adds one charging session; returns its constant discomfort.
    private double AddSession(ConeProgramBuilder b, int m, DeferrableLoad ev, double e0, int first, int deadline)
    {
        if (e0 <= 0) return 0;
        double full = ev.MaxKw * Dt, w = ev.DeferralWeight;
        int last = Math.Min(deadline, _start + _len) - _start - 1;
        bool deadlineInside = deadline <= _start + _len;
        if (e0 >= full * (deadline - (_start + first)) - 1e-9)
        {
            // Cannot be finished (or only just, at full power throughout): minimum = desired, the schedule is fixed.
            double r = e0, constant = 0;
            for (int k = first; k <= last; k++)
            {
                double p = ev.DesiredKw(r);
                _fixedKw[Index(k, m, ApplianceKind.Deferrable)] = p;
                r = Math.Max(0, r - p * Dt);
                if (_start + k + 1 >= deadline) constant += ev.UnmetEnergyPenalty * r;
            }
            return constant;
        }
        Variable? prevR = null;
        double discC = 0;
        for (int k = first; k <= last; k++)
        {
            int t = _start + k;
            var p = b.AddVariable($"ev[{m},{k}]", 0, ev.MaxKw);
            _var[Index(k, m, ApplianceKind.Deferrable)] = p;
            // Deferral: w·[(kW − p)·Δt − (A − R_{k−1})⁺], the last term exact at the session's first slot, else its chord.
            Objective(b, _discTerms, p, -w * Dt);
            discC += w * full;
            if (prevR is null) discC -= w * Math.Max(0, full - e0);
            else
            {
                double rMax = Math.Min(e0, full * (deadline - t));
                double slope = rMax <= full ? 1 : full / rMax;
                discC -= w * full;
                Objective(b, _discTerms, prevR.Value, w * slope);
            }
            bool final = deadlineInside && k == last;
            if (final)
            {
                // R after the deadline slot is zero: p·Δt = R_{k−1} (or the whole energy if the session is one slot long).
                var eq = LinearExpression.Of(p, Dt);
                if (prevR is { } pr) eq.Add(pr, -1);
                b.AddEquality(eq, prevR is null ? e0 : 0);
                break;
            }
            double cap = full * (deadline - t - 1);
            var r = b.AddVariable($"evR[{m},{k}]", 0, cap < e0 ? cap : double.PositiveInfinity);
            var rec = LinearExpression.Of(r).Add(p, Dt);
            if (prevR is { } pr2) rec.Add(pr2, -1);
            b.AddEquality(rec, prevR is null ? e0 : 0);
            prevR = r;
        }
        return discC;
    }

    private void AddTank(ConeProgramBuilder b, int m, ThermalStorage tank, HouseholdTrace tr)
    {
        double e = _tankStartKwh[m];
        int k = 0;
        // Above the setpoint (possible only at the start): the thermostat keeps the element off.
        for (; k < _len && tank.EnergyAfter(e, 0, tr.HotWaterLitres[_start + k]) > tank.SetpointEnergyKwh; k++)
            e = Math.Max(0, tank.EnergyAfter(e, 0, tr.HotWaterLitres[_start + k]));
        double c = tank.HeatCapacityKwhPerK, lambda = tank.LossKwPerK * Dt / c, loss0 = tank.LossKwPerK * Dt * (tank.InletC - tank.AmbientC);
        Variable? prev = null;
        for (; k < _len; k++)
        {
            int t = _start + k;
            double f = Math.Min(tr.HotWaterLitres[t], tank.TankLitres) / tank.TankLitres;
            var p = b.AddVariable($"tank[{m},{k}]", 0, tank.HeaterKw);
            _var[Index(k, m, ApplianceKind.Thermal)] = p;
            var en = b.AddVariable($"tankE[{m},{k}]", double.NegativeInfinity, tank.SetpointEnergyKwh);
            // E_k − (1 − λ − f)·E_{k−1} − Δt·p = −loss0
            var bal = LinearExpression.Of(en).Add(p, -Dt);
            double rhs = -loss0;
            if (prev is { } pv) bal.Add(pv, -(1 - lambda - f));
            else rhs += (1 - lambda - f) * e;
            b.AddEquality(bal, rhs);
            var u = b.AddVariable($"tankU[{m},{k}]", 0);
            b.AddGreaterOrEqual(LinearExpression.Of(u).Add(en), tank.LowerComfortEnergyKwh);
            Objective(b, _discTerms, u, tank.ShortfallWeight);
            prev = en;
        }
    }

    public OptimumDay Read(ReadOnlySpan<double> x, SolverResult res, double buildMs, double solveMs)
    {
        var net = _sc.Feeder.Network;
        int buses = net.BusCount;
        var apps = new double[_len * _n * Kinds];
        var hh = new double[_len * _n];
        for (int j = 0; j < apps.Length; j++) apps[j] = _var[j] is { } v ? x[v.Index] : _fixedKw[j];
        for (int j = 0; j < hh.Length; j++) hh[j] = apps[3 * j] + apps[3 * j + 1] + apps[3 * j + 2];
        double bill = _billConstant, disc = _discConstant;
        foreach (var (i, c) in _billTerms) bill += c * x[i];
        foreach (var (i, c) in _discTerms) disc += c * x[i];

        // Exact AC power flow of the schedule, and the relaxation gap of the cone solution.
        var flow = new AcPowerFlow(net);
        var pf = new PowerFlowResult(buses);
        var lp = new double[buses];
        var lq = new double[buses];
        var volt = new double[buses];
        var gap = new double[buses];
        double peak = double.NegativeInfinity, maxGap = 0;
        int violating = 0;
        for (int k = 0; k < _len; k++)
        {
            for (int j = 0; j < buses; j++) { lp[j] = _basePKw[k, j]; lq[j] = _baseQKw[k, j]; }
            for (int m = 0; m < _n; m++)
            {
                Household h = _sc.Households[m];
                int bus = _sc.Feeder.IndexOf(h.BusId);
                double flex = 0;
                for (int a = 0; a < Kinds; a++) if (_var[(k * _n + m) * Kinds + a] is not null) flex += apps[(k * _n + m) * Kinds + a];
                lp[bus] += flex;
                lq[bus] += h.KvarPerKw * flex;
            }
            for (int j = 0; j < buses; j++) { lp[j] = net.ToPu(lp[j]); lq[j] = net.ToPu(lq[j]); }
            flow.Solve(lp, lq, pf);
            peak = Math.Max(peak, net.ToKw(pf.SubstationPPu));
            if (!pf.Converged || pf.FindViolations(_sc.Feeder).Count > 0) violating++;
            _feeder[k].Recover(x, volt, gap);
            for (int j = 0; j < buses; j++) maxGap = Math.Max(maxGap, Math.Abs(gap[j]));
        }

        return new OptimumDay(SlotCalendar.DayOf(_start), _start, _len, res.Status, bill + disc, bill, disc, ExactDiscomfort(apps),
            peak, violating, maxGap, solveMs, buildMs, res.Iterations, Program.VariableCount, Program.EqualityCount + Program.Cones.Dimension,
            [.. hh], [.. apps]);
    }

    // The environment's discomfort formulas applied to the schedule.
    private double ExactDiscomfort(double[] apps)
    {
        double total = 0;
        for (int m = 0; m < _n; m++)
        {
            Household h = _sc.Households[m];
            HouseholdTrace tr = _sc.Traces[m];
            if (h.Deferrable is { } ev)
                foreach (var (e0, first, deadline) in Sessions(m))
                {
                    double r = e0;
                    int last = Math.Min(deadline, _start + _len) - _start - 1;
                    for (int k = first; k <= last; k++)
                    {
                        double p = apps[Index(k, m, ApplianceKind.Deferrable)];
                        total += ev.DeferralWeight * Math.Max(0, ev.DesiredKw(r) - p) * Dt;
                        r = Math.Max(0, r - p * Dt);
                        if (_start + k + 1 >= deadline) total += ev.UnmetEnergyPenalty * r;
                    }
                }
            if (h.Thermal is { } tank)
            {
                double e = _tankStartKwh[m];
                for (int k = 0; k < _len; k++)
                {
                    e = Math.Max(0, tank.EnergyAfter(e, apps[Index(k, m, ApplianceKind.Thermal)], tr.HotWaterLitres[_start + k]));
                    total += tank.Discomfort(e);
                }
            }
            if (h.Curtailable is { } c)
                for (int k = 0; k < _len; k++)
                    total += c.Discomfort(tr.CurtailableDesiredKw[_start + k], apps[Index(k, m, ApplianceKind.Curtailable)]);
        }
        return total;
    }
}
