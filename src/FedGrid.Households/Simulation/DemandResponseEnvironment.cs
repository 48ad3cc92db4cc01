using FedGrid.Grid.PowerFlow;
using FedGrid.Households.Scenarios;

namespace FedGrid.Households.Simulation;

/// <summary>What one <see cref="DemandResponseEnvironment.Step"/> produced. Allocate once (<see cref="DemandResponseEnvironment.CreateResult"/>) and reuse.</summary>
public sealed class StepResult
{
    /// <summary>Allocates a result for <paramref name="households"/> households on <paramref name="buses"/> buses.</summary>
    public StepResult(int households, int buses)
    {
        BillDollars = new double[households];
        DiscomfortDollars = new double[households];
        HouseholdKw = new double[households];
        DeferrableKw = new double[households];
        ThermalKw = new double[households];
        CurtailableKw = new double[households];
        PowerFlow = new PowerFlowResult(buses);
    }

    /// <summary>The slot that was stepped.</summary>
    public int Slot { get; internal set; }

    /// <summary>Price of that slot, $ per kWh.</summary>
    public double PricePerKwh { get; internal set; }

    /// <summary>Bill of each household for the slot: price × (base + flexible kW) × 0.25 h, $.</summary>
    public double[] BillDollars { get; }

    /// <summary>Discomfort of each household for the slot, $.</summary>
    public double[] DiscomfortDollars { get; }

    /// <summary>Total power of each household (base + flexible), kW.</summary>
    public double[] HouseholdKw { get; }

    /// <summary>Power given to each household's deferrable appliance, kW.</summary>
    public double[] DeferrableKw { get; }

    /// <summary>Power given to each household's thermal appliance, kW.</summary>
    public double[] ThermalKw { get; }

    /// <summary>Power given to each household's curtailable appliance, kW.</summary>
    public double[] CurtailableKw { get; }

    /// <summary>Sum of the bills, $.</summary>
    public double TotalBillDollars { get; internal set; }

    /// <summary>Sum of the discomforts, $.</summary>
    public double TotalDiscomfortDollars { get; internal set; }

    /// <summary>Exact AC power flow of the feeder at this slot's loads.</summary>
    public PowerFlowResult PowerFlow { get; }

    /// <summary>Real power imported at the substation, kW.</summary>
    public double SubstationImportKw { get; internal set; }

    /// <summary>Line losses, kW.</summary>
    public double LossKw { get; internal set; }

    /// <summary>Lowest bus voltage, per unit.</summary>
    public double MinVoltagePu => PowerFlow.MinVoltagePu;

    /// <summary>
    /// Number of limits broken (<see cref="PowerFlowResult.CountViolations"/>: the rule and tolerance of <see cref="PowerFlowResult.FindViolations"/>, which lists them;
    /// call it only when this is non-zero to stay allocation-free).
    /// </summary>
    public int ViolationCount { get; internal set; }

    /// <summary>Whether the power flow converged.</summary>
    public bool Converged => PowerFlow.Converged;
}

/// <summary>
/// The demand-response MDP on a feeder, one 15-minute slot per step. State per household: base
/// load, minimum and desired flexible power (kW); shared: price and the public time of day.
/// Action: one flexible setpoint per household inside [minimum, desired]; it is split among the
/// household's appliances by <see cref="SplitRule"/>. A step returns each household's bill and
/// discomfort, advances the appliances (deferred energy carries forward, tanks cool and are drawn),
/// and solves the exact AC power flow of the feeder with every bus carrying its households
/// (power factor of each) plus the scenario's fixed loads.
/// <see cref="Step"/> allocates nothing.
/// </summary>
public sealed class DemandResponseEnvironment
{
    /// <summary>
    /// How a household setpoint S is split: every appliance first gets its minimum; the rest,
    /// S − Σ minimum, goes to the appliances in falling order of <see cref="Appliance.DiscomfortWeight"/>
    /// (ties: deferrable, thermal, curtailable), each filled up to its desired power.
    /// </summary>
    public const string SplitRule = "minimums first, then the remainder by falling discomfort weight up to each desired power";

    private const int Kinds = 3; // 0 deferrable, 1 thermal, 2 curtailable
    private readonly Scenario _scenario;
    private readonly AcPowerFlow _flow;
    private readonly int _n, _slots;
    private readonly int[] _bus;
    private readonly double[] _kvarPerKw;
    private readonly DeferrableLoad?[] _ev;
    private readonly ThermalStorage?[] _tank;
    private readonly CurtailableLoad?[] _curt;
    private readonly int[] _priority;
    private readonly double[] _fixedP, _fixedQ, _busP, _busQ;
    private readonly double[] _base, _min, _des, _appMin, _appDes;
    private readonly double[] _evRemaining, _tankEnergy;
    private readonly int[] _evSession;
    private readonly bool[] _evStarted;
    private int _slot;

    /// <summary>Prepares the environment (validates the scenario) and resets it to slot 0.</summary>
    /// <exception cref="ArgumentException">The scenario is inconsistent.</exception>
    public DemandResponseEnvironment(Scenario scenario, PowerFlowOptions? powerFlowOptions = null)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        scenario.Validate();
        _scenario = scenario;
        var net = scenario.Feeder.Network;
        _flow = new AcPowerFlow(net, powerFlowOptions);
        _n = scenario.Households.Length;
        _slots = scenario.SlotCount;
        _bus = new int[_n];
        _kvarPerKw = new double[_n];
        _ev = new DeferrableLoad?[_n];
        _tank = new ThermalStorage?[_n];
        _curt = new CurtailableLoad?[_n];
        _priority = new int[_n * Kinds];
        for (int i = 0; i < _n; i++)
        {
            Household h = scenario.Households[i];
            _bus[i] = scenario.Feeder.IndexOf(h.BusId);
            _kvarPerKw[i] = h.KvarPerKw;
            _ev[i] = h.Deferrable;
            _tank[i] = h.Thermal;
            _curt[i] = h.Curtailable;
            double[] w = [_ev[i]?.DiscomfortWeight ?? -1, _tank[i]?.DiscomfortWeight ?? -1, _curt[i]?.DiscomfortWeight ?? -1];
            int[] order = [0, 1, 2];
            Array.Sort(order, (a, b) => w[a] != w[b] ? w[b].CompareTo(w[a]) : a.CompareTo(b));
            order.CopyTo(_priority, i * Kinds);
        }
        int buses = net.BusCount;
        (_fixedP, _fixedQ) = scenario.FixedLoadPerBus();
        _busP = new double[buses];
        _busQ = new double[buses];
        _base = new double[_n];
        _min = new double[_n];
        _des = new double[_n];
        _appMin = new double[_n * Kinds];
        _appDes = new double[_n * Kinds];
        _evRemaining = new double[_n];
        _tankEnergy = new double[_n];
        _evSession = new int[_n];
        _evStarted = new bool[_n];
        Reset();
    }

    /// <summary>The scenario.</summary>
    public Scenario Scenario => _scenario;

    /// <summary>Number of households.</summary>
    public int HouseholdCount => _n;

    /// <summary>Slots in the horizon.</summary>
    public int SlotCount => _slots;

    /// <summary>The slot the next <see cref="Step"/> will simulate.</summary>
    public int Slot => _slot;

    /// <summary>Whether every slot of the horizon has been stepped.</summary>
    public bool Done => _slot >= _slots;

    /// <summary>Price of the current slot, $ per kWh.</summary>
    public double PricePerKwh => _scenario.Tariff.PriceAt(Math.Min(_slot, _slots - 1));

    /// <summary>Public time of day of the current slot, hours since midnight.</summary>
    public double HourOfDay => SlotCalendar.HourOfDay(_slot);

    /// <summary>Whether the current slot is on a weekend.</summary>
    public bool IsWeekend => _scenario.Calendar.IsWeekend(_slot);

    /// <summary>Base load of each household in the current slot, kW.</summary>
    public ReadOnlySpan<double> BaseKw => _base;

    /// <summary>Least flexible power of each household in the current slot, kW (Σ of its appliances' minimums).</summary>
    public ReadOnlySpan<double> FlexMinKw => _min;

    /// <summary>Desired flexible power of each household in the current slot, kW (Σ of its appliances' desired powers).</summary>
    public ReadOnlySpan<double> FlexDesiredKw => _des;

    /// <summary>Energy each household's deferrable appliance still has to deliver in its current session, kWh (0 when none).</summary>
    public ReadOnlySpan<double> DeferrableRemainingKwh => _evRemaining;

    /// <summary>Stored energy above inlet of each household's tank, kWh (0 without one).</summary>
    public ReadOnlySpan<double> TankEnergyKwh => _tankEnergy;

    /// <summary>
    /// The charging session in progress at the current slot for a household (null when none): with
    /// <see cref="DeferrableRemainingKwh"/> and <see cref="TankEnergyKwh"/> this is the appliance state a
    /// perfect-foresight optimum starting at the current slot needs.
    /// </summary>
    public ChargingSession? CurrentSession(int household) =>
        _evStarted[household] ? _scenario.Traces[household].Sessions[_evSession[household]] : null;

    /// <summary>Minimum and desired power of one appliance kind of a household in the current slot (zeros when absent).</summary>
    public (double MinKw, double DesiredKw) ApplianceBounds(int household, ApplianceKind kind) =>
        (_appMin[household * Kinds + (int)kind], _appDes[household * Kinds + (int)kind]);

    /// <summary>A result buffer sized for this environment.</summary>
    public StepResult CreateResult() => new(_n, _scenario.Feeder.Network.BusCount);

    /// <summary>Back to slot 0: sessions not started, tanks at the traces' initial temperatures.</summary>
    public void Reset()
    {
        _slot = 0;
        for (int i = 0; i < _n; i++)
        {
            _evRemaining[i] = 0;
            _evSession[i] = 0;
            _evStarted[i] = false;
            _tankEnergy[i] = _tank[i] is { } t ? Math.Max(0, t.EnergyAt(_scenario.Traces[i].InitialTankC)) : 0;
        }
        ComputeBounds();
    }

    /// <summary>
    /// Simulates the current slot with one flexible setpoint per household (kW) and advances to the next.
    /// </summary>
    /// <exception cref="ArgumentException">Wrong number of setpoints, or a setpoint outside its household's [minimum, desired] box (the message names it).</exception>
    /// <exception cref="InvalidOperationException">The horizon is over.</exception>
    public void Step(ReadOnlySpan<double> setpointsKw, StepResult result) => StepCore(setpointsKw, default, result);

    /// <summary>
    /// Simulates the current slot with one power per appliance instead of one household setpoint split by
    /// <see cref="SplitRule"/>: <paramref name="applianceKw"/>[3·m + k] is household m's power for
    /// <see cref="ApplianceKind"/> k, each inside that appliance's own [minimum, desired] box
    /// (<see cref="ApplianceBounds"/>). Same physics, bills and discomfort as <see cref="Step"/>; used to replay
    /// a schedule computed per appliance (the perfect-foresight optimum). Allocates nothing.
    /// </summary>
    /// <exception cref="ArgumentException">Wrong length, or a power outside its appliance's box (the message names it).</exception>
    /// <exception cref="InvalidOperationException">The horizon is over.</exception>
    public void StepAppliances(ReadOnlySpan<double> applianceKw, StepResult result)
    {
        if (applianceKw.Length != _n * Kinds)
            throw new ArgumentException($"expected {_n * Kinds} appliance powers (3 per household), got {applianceKw.Length}", nameof(applianceKw));
        if (!Done)
            for (int j = 0; j < applianceKw.Length; j++)
            {
                double a = applianceKw[j], tol = 1e-9 * Math.Max(1, _appDes[j]);
                if (!(a >= _appMin[j] - tol && a <= _appDes[j] + tol))
                    throw new ArgumentException(
                        $"power {a} kW of {(ApplianceKind)(j % Kinds)} appliance of household '{_scenario.Households[j / Kinds].Id}' is outside its box [{_appMin[j]}, {_appDes[j]}] kW at slot {_slot}",
                        nameof(applianceKw));
            }
        Span<double> totals = stackalloc double[0];
        StepCore(totals, applianceKw, result);
    }

    private void StepCore(ReadOnlySpan<double> setpointsKw, ReadOnlySpan<double> applianceKw, StepResult result)
    {
        ArgumentNullException.ThrowIfNull(result);
        bool perAppliance = applianceKw.Length > 0;
        if (Done) throw new InvalidOperationException($"the horizon of {_slots} slots is over; call Reset()");
        if (!perAppliance && setpointsKw.Length != _n)
            throw new ArgumentException($"expected {_n} setpoints (one per household), got {setpointsKw.Length}", nameof(setpointsKw));
        if (result.BillDollars.Length != _n || result.PowerFlow.VoltagePu.Length != _busP.Length)
            throw new ArgumentException("result buffer was sized for another environment; use CreateResult()", nameof(result));
        for (int i = 0; i < _n && !perAppliance; i++)
        {
            double s = setpointsKw[i];
            double tol = 1e-9 * Math.Max(1, _des[i]);
            if (!(s >= _min[i] - tol && s <= _des[i] + tol))
                throw new ArgumentException(
                    $"setpoint {s} kW of household '{_scenario.Households[i].Id}' is outside its box [{_min[i]}, {_des[i]}] kW at slot {_slot}",
                    nameof(setpointsKw));
        }

        int t = _slot;
        double price = _scenario.Tariff.PriceAt(t);
        double dt = SlotCalendar.SlotHours;
        Array.Copy(_fixedP, _busP, _busP.Length);
        Array.Copy(_fixedQ, _busQ, _busQ.Length);
        double billSum = 0, discomfortSum = 0;
        Span<double> share = stackalloc double[Kinds];
        for (int i = 0; i < _n; i++)
        {
            double s;
            if (perAppliance)
            {
                s = 0;
                for (int k = 0; k < Kinds; k++)
                {
                    share[k] = Math.Clamp(applianceKw[i * Kinds + k], _appMin[i * Kinds + k], _appDes[i * Kinds + k]);
                    s += share[k];
                }
            }
            else
            {
                s = Math.Clamp(setpointsKw[i], _min[i], _des[i]);
                Split(i, s, share);
            }
            HouseholdTrace tr = _scenario.Traces[i];
            double discomfort = 0;
            if (_ev[i] is { } ev && _evStarted[i])
            {
                discomfort += ev.DeferralWeight * Math.Max(0, _appDes[i * Kinds] - share[0]) * dt;
                _evRemaining[i] = Math.Max(0, _evRemaining[i] - share[0] * dt);
                ChargingSession cs = tr.Sessions[_evSession[i]];
                if (t + 1 >= cs.DeadlineSlot)
                {
                    discomfort += ev.UnmetEnergyPenalty * _evRemaining[i];
                    _evRemaining[i] = 0;
                    _evStarted[i] = false;
                    _evSession[i]++;
                }
            }
            if (_tank[i] is { } tank)
            {
                _tankEnergy[i] = Math.Max(0, tank.EnergyAfter(_tankEnergy[i], share[1], tr.HotWaterLitres[t]));
                discomfort += tank.Discomfort(_tankEnergy[i]);
            }
            if (_curt[i] is { } c)
                discomfort += c.Discomfort(_appDes[i * Kinds + 2], share[2]);

            double kw = _base[i] + s;
            double bill = price * kw * dt;
            result.BillDollars[i] = bill;
            result.DiscomfortDollars[i] = discomfort;
            result.HouseholdKw[i] = kw;
            result.DeferrableKw[i] = share[0];
            result.ThermalKw[i] = share[1];
            result.CurtailableKw[i] = share[2];
            billSum += bill;
            discomfortSum += discomfort;
            _busP[_bus[i]] += kw;
            _busQ[_bus[i]] += kw * _kvarPerKw[i];
        }

        var net = _scenario.Feeder.Network;
        for (int b = 0; b < _busP.Length; b++)
        {
            _busP[b] = net.ToPu(_busP[b]);
            _busQ[b] = net.ToPu(_busQ[b]);
        }
        _flow.Solve(_busP, _busQ, result.PowerFlow);
        result.Slot = t;
        result.PricePerKwh = price;
        result.TotalBillDollars = billSum;
        result.TotalDiscomfortDollars = discomfortSum;
        result.SubstationImportKw = net.ToKw(result.PowerFlow.SubstationPPu);
        result.LossKw = net.ToKw(result.PowerFlow.LossPu);
        result.ViolationCount = result.PowerFlow.CountViolations(_scenario.Feeder.Network);

        _slot++;
        if (!Done) ComputeBounds();
    }

    private void Split(int i, double setpoint, Span<double> share)
    {
        double rest = setpoint;
        for (int k = 0; k < Kinds; k++)
        {
            share[k] = _appMin[i * Kinds + k];
            rest -= share[k];
        }
        for (int r = 0; r < Kinds && rest > 0; r++)
        {
            int k = _priority[i * Kinds + r];
            double room = _appDes[i * Kinds + k] - share[k];
            double add = Math.Min(room, rest);
            share[k] += add;
            rest -= add;
        }
    }

    private void ComputeBounds()
    {
        int t = _slot;
        for (int i = 0; i < _n; i++)
        {
            HouseholdTrace tr = _scenario.Traces[i];
            _base[i] = tr.BaseKw[t];
            int o = i * Kinds;
            _appMin[o] = _appDes[o] = 0;
            if (_ev[i] is { } ev)
            {
                if (!_evStarted[i] && _evSession[i] < tr.Sessions.Length && tr.Sessions[_evSession[i]].ArrivalSlot <= t)
                {
                    _evStarted[i] = true;
                    _evRemaining[i] = tr.Sessions[_evSession[i]].EnergyKwh;
                }
                if (_evStarted[i])
                {
                    int deadline = tr.Sessions[_evSession[i]].DeadlineSlot;
                    _appDes[o] = ev.DesiredKw(_evRemaining[i]);
                    _appMin[o] = ev.MinKw(_evRemaining[i], t, deadline);
                }
            }
            if (_tank[i] is { } tank)
            {
                _appMin[o + 1] = tank.MinKw(_tankEnergy[i], tr.HotWaterLitres[t]);
                _appDes[o + 1] = tank.DesiredKw(_tankEnergy[i], tr.HotWaterLitres[t]);
            }
            else _appMin[o + 1] = _appDes[o + 1] = 0;
            if (_curt[i] is { } c)
            {
                _appDes[o + 2] = tr.CurtailableDesiredKw[t];
                _appMin[o + 2] = c.MinKw(_appDes[o + 2]);
            }
            else _appMin[o + 2] = _appDes[o + 2] = 0;
            _min[i] = _appMin[o] + _appMin[o + 1] + _appMin[o + 2];
            _des[i] = _appDes[o] + _appDes[o + 1] + _appDes[o + 2];
        }
    }
}

/// <summary>Appliance kinds, in the order the environment keeps them.</summary>
public enum ApplianceKind
{
    /// <summary>Deferrable energy with a deadline (<see cref="DeferrableLoad"/>).</summary>
    Deferrable = 0,
    /// <summary>Thermal storage (<see cref="ThermalStorage"/>).</summary>
    Thermal = 1,
    /// <summary>Curtailable load (<see cref="CurtailableLoad"/>).</summary>
    Curtailable = 2,
}
