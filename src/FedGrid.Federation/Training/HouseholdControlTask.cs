using FedGrid.Grid.Projection;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;
using FedGrid.Households.Tariffs;
using FedGrid.Learning.Tasks;

namespace FedGrid.Federation.Training;

/// <summary>Settings of <see cref="HouseholdControlTask"/>.</summary>
/// <param name="Project">Project every slot's proposals onto the feeder limits with <see cref="SetpointProjector"/> (the coordinator's safety projection).</param>
/// <param name="Projection">Projector settings, or null for the defaults.</param>
/// <param name="ShapingDiscount">
/// When set, the costs handed to the learner are shaped with the potential of <see cref="HouseholdControlTask.EnergyOwedDollars"/>
/// (Ng, Harada &amp; Russell 1999): c' = c + γ·Ψ(s') − Ψ(s) with γ this discount (it must equal the learner's γ for the
/// shaping to preserve optimal policies). Only the learner's training signal changes; <see cref="HouseholdControlTask.LastDay"/>
/// and <see cref="HouseholdControlTask.LastStep"/> keep the environment's true costs. Null: the true costs.
/// </param>
public sealed record HouseholdTaskOptions(bool Project = true, ProjectionOptions? Projection = null, double? ShapingDiscount = null)
{
    /// <summary>The defaults: projection on.</summary>
    public static HouseholdTaskOptions Default { get; } = new();
}

/// <summary>
/// The demand-response environment as an <see cref="IControlTask"/>: one agent per household, one action (its flexible
/// setpoint, kW) inside [flex minimum, flex desired], cost = the household's bill + discomfort of the slot ($).
/// Before each slot the proposals go through the coordinator's safety projection (<see cref="SetpointProjector"/>,
/// household form: one <see cref="FlexibleUnit"/> per household at its bus, tan φ from its power factor), which
/// returns them unchanged when the exact AC power flow already satisfies every limit.
/// <para>
/// Episodes are simulated days of one continuous horizon: the environment runs from slot 0 to the end of the
/// scenario, deferred vehicle energy and tank temperatures carry over midnight, and <see cref="Step"/> reports the
/// end of each day (the learner may bootstrap across it; see <see cref="HorizonOver"/>). <see cref="Reset"/> rewinds
/// to slot 0 (the scenario fixes the data, so every seed gives the same first day); <see cref="NextDay"/> opens the
/// next day without rewinding. Each finished day's figures are in <see cref="LastDay"/>.
/// </para>
/// State per household, each scaled to order one (see <see cref="FeatureNames"/>).
/// </summary>
public sealed class HouseholdControlTask : IControlTask
{
    /// <summary>Scale of powers in the state, kW (base and flexible loads are divided by it).</summary>
    public const double KwScale = 5.0;

    /// <summary>Scale of prices in the state, $ per kWh.</summary>
    public const double PriceScale = 0.25;

    /// <summary>Scale of deferrable energy in the state, kWh.</summary>
    public const double EnergyScale = 10.0;

    /// <summary>Scale of the time left to a vehicle's departure in the state, hours.</summary>
    public const double DeadlineScaleHours = 12.0;

    /// <summary>Look-ahead window of the public price forecast, slots (12 hours).</summary>
    public const int LookAheadSlots = 48;

    /// <summary>
    /// The per-household features, in order. Public information: price, time of day (as sin/cos of the daily angle),
    /// weekend flag. The household's own information: its base load, flexible minimum and desired power (the box),
    /// the vehicle energy still to deliver and the hours to its departure (both 0 without a session: they tell the
    /// policy how much of the box is deferrable and for how long), and the tank's charge between its lower comfort
    /// (0) and setpoint (1) energy (0 without a tank: how much pre-heating is possible). Then public look-ahead from
    /// <see cref="PublicForecast"/> over the next <see cref="LookAheadSlots"/> slots: the price above the cheapest and below the
    /// dearest forecast price, and the hours to the next change of the forecast price; and the household's own urgency:
    /// vehicle energy still to deliver ÷ (hours to departure × charger power), 1 = must charge at full power from now on.
    /// </summary>
    public static IReadOnlyList<string> FeatureNames { get; } =
    [
        "baseKw/5", "flexMinKw/5", "flexDesiredKw/5", "price/0.25", "sin(time of day)", "cos(time of day)", "weekend",
        "deferrableRemainingKwh/10", "hoursToDeparture/12", "tankCharge",
        "(price - cheapest next 12 h)/0.25", "(dearest next 12 h - price)/0.25", "hoursToPriceChange/12", "chargingUrgency",
    ];

    /// <summary>Number of state features per household (the length of a household's block of the first layer's input).</summary>
    public const int FeaturesPerHousehold = 14;

    private readonly double[] _forecast, _aheadMin, _aheadMax, _aheadMean, _potential;

    private readonly int[] _nextChange;
    private readonly double[] _chargerKw;
    private readonly DemandResponseEnvironment _env;
    private readonly StepResult _step;
    private readonly SetpointProjector? _projector;
    private readonly ProjectionInput? _input;
    private readonly ProjectionResult? _projection;
    private readonly int[] _householdBus;
    private readonly double[] _kvarPerKw, _fixedKw, _fixedKvar, _setpoints;
    private readonly ThermalStorage?[] _tank;
    private double _cost, _bill, _discomfort, _peak;
    private int _violationSlots, _projections, _unverified, _infeasible, _failures, _dayIndex, _daySlots;

    /// <summary>Creates the task on a new environment of <paramref name="scenario"/>.</summary>
    /// <param name="scenario">The scenario (its horizon is the training budget).</param>
    /// <param name="options">Settings, or null for the defaults.</param>
    public HouseholdControlTask(Scenario scenario, HouseholdTaskOptions? options = null)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        Options = options ?? HouseholdTaskOptions.Default;
        _env = new DemandResponseEnvironment(scenario);
        _step = _env.CreateResult();
        int n = _env.HouseholdCount, buses = scenario.Feeder.Network.BusCount;
        _householdBus = new int[n];
        _kvarPerKw = new double[n];
        _tank = new ThermalStorage?[n];
        _setpoints = new double[n];
        _chargerKw = new double[n];
        _potential = new double[n];
        int slots = _env.SlotCount;
        _forecast = new double[slots];
        for (int t = 0; t < slots; t++) _forecast[t] = PublicForecast(scenario.Tariff, t);
        _aheadMin = new double[slots];
        _aheadMax = new double[slots];
        _aheadMean = new double[slots];
        _nextChange = new int[slots];
        for (int t = 0; t < slots; t++)
        {
            int end = Math.Min(slots, t + LookAheadSlots);
            double lo = double.PositiveInfinity, hi = double.NegativeInfinity, sum = 0;
            for (int u = t; u < end; u++)
            {
                lo = Math.Min(lo, _forecast[u]);
                hi = Math.Max(hi, _forecast[u]);
                sum += _forecast[u];
            }
            _aheadMin[t] = lo;
            _aheadMax[t] = hi;
            _aheadMean[t] = sum / (end - t);
            int c = t + 1;
            while (c < end && Math.Abs(_forecast[c] - _forecast[t]) < 1e-9) c++;
            _nextChange[t] = c - t;
        }
        var units = new FlexibleUnit[n];
        for (int m = 0; m < n; m++)
        {
            Household h = scenario.Households[m];
            _householdBus[m] = scenario.Feeder.IndexOf(h.BusId);
            _kvarPerKw[m] = h.KvarPerKw;
            _tank[m] = h.Thermal;
            _chargerKw[m] = h.Deferrable?.MaxKw ?? 0;
            units[m] = new FlexibleUnit(h.Id, h.BusId, h.KvarPerKw);
        }
        (_fixedKw, _fixedKvar) = scenario.FixedLoadPerBus();
        if (Options.Project)
        {
            _projector = new SetpointProjector(scenario.Feeder, units, options: Options.Projection);
            _input = new ProjectionInput(buses, n);
            _projection = _projector.CreateResult();
        }
        Reset(0);
    }

    /// <summary>The settings.</summary>
    public HouseholdTaskOptions Options { get; }

    /// <summary>The environment being driven.</summary>
    public DemandResponseEnvironment Environment => _env;

    /// <summary>The scenario.</summary>
    public Scenario Scenario => _env.Scenario;

    /// <summary>Whole days in the horizon.</summary>
    public int DayCount => _env.SlotCount / SlotCalendar.SlotsPerDay;

    /// <summary>Index of the day in progress (0-based).</summary>
    public int Day => _dayIndex;

    /// <summary>Whether the last slot of the horizon has been stepped.</summary>
    public bool HorizonOver => _env.Done;

    /// <summary>The environment's result of the last <see cref="Step"/> (bills, discomfort, power flow).</summary>
    public StepResult LastStep => _step;

    /// <summary>The projection of the last <see cref="Step"/>, or null when projection is off.</summary>
    public ProjectionResult? LastProjection => _projection;

    /// <summary>Figures of the last finished day (null before the first day ends).</summary>
    public DayMetrics? LastDay { get; private set; }

    /// <inheritdoc />
    public int AgentCount => _env.HouseholdCount;

    /// <inheritdoc />
    public int StateSizePerAgent => FeaturesPerHousehold;

    /// <inheritdoc />
    public int ActionSizePerAgent => 1;

    /// <summary>Rewinds the environment to slot 0 (day 0). The data are the scenario's, so the seed does not change them.</summary>
    /// <param name="seed">Unused: the scenario's seed fixed the data.</param>
    public void Reset(ulong seed)
    {
        _env.Reset();
        _dayIndex = 0;
        LastDay = null;
        ClearDay();
    }

    /// <summary>Opens the next day of the horizon after <see cref="Step"/> reported a day's end (no rewind).</summary>
    /// <exception cref="InvalidOperationException">The current day is not finished, or the horizon is over.</exception>
    public void NextDay()
    {
        if (_daySlots != SlotCalendar.SlotsPerDay && !(_daySlots > 0 && _env.Done))
            throw new InvalidOperationException($"day {_dayIndex} has {_daySlots} of {SlotCalendar.SlotsPerDay} slots stepped");
        if (_env.Done) throw new InvalidOperationException("the horizon is over; call Reset");
        _dayIndex++;
        ClearDay();
    }

    /// <inheritdoc />
    public void Observe(Span<float> state)
    {
        int n = _env.HouseholdCount;
        if (state.Length != n * FeaturesPerHousehold) throw new ArgumentException($"state needs {n * FeaturesPerHousehold} floats", nameof(state));
        ReadOnlySpan<double> baseKw = _env.BaseKw, min = _env.FlexMinKw, des = _env.FlexDesiredKw;
        ReadOnlySpan<double> remaining = _env.DeferrableRemainingKwh, tank = _env.TankEnergyKwh;
        int slot = Math.Min(_env.Slot, _env.SlotCount - 1);
        double angle = 2 * Math.PI * SlotCalendar.SlotOfDay(slot) / SlotCalendar.SlotsPerDay;
        float price = (float)(_env.PricePerKwh / PriceScale), sin = (float)Math.Sin(angle), cos = (float)Math.Cos(angle);
        float weekend = _env.Scenario.Calendar.IsWeekend(slot) ? 1f : 0f;
        for (int m = 0; m < n; m++)
        {
            Span<float> x = state.Slice(m * FeaturesPerHousehold, FeaturesPerHousehold);
            x[0] = (float)(baseKw[m] / KwScale);
            x[1] = (float)(min[m] / KwScale);
            x[2] = (float)(des[m] / KwScale);
            x[3] = price;
            x[4] = sin;
            x[5] = cos;
            x[6] = weekend;
            x[7] = (float)(remaining[m] / EnergyScale);
            ChargingSession? session = _env.CurrentSession(m);
            x[8] = session is null ? 0f : (float)((session.DeadlineSlot - slot) * SlotCalendar.SlotHours / DeadlineScaleHours);
            x[9] = _tank[m] is { } t
                ? (float)Math.Clamp((tank[m] - t.LowerComfortEnergyKwh) / (t.SetpointEnergyKwh - t.LowerComfortEnergyKwh), -1, 1.5)
                : 0f;
            x[10] = (float)((_forecast[slot] - _aheadMin[slot]) / PriceScale);
            x[11] = (float)((_aheadMax[slot] - _forecast[slot]) / PriceScale);
            x[12] = (float)(_nextChange[slot] * SlotCalendar.SlotHours / DeadlineScaleHours);
            x[13] = session is null || _chargerKw[m] <= 0 ? 0f
                : (float)Math.Clamp(remaining[m] / (Math.Max(1, session.DeadlineSlot - slot) * SlotCalendar.SlotHours * _chargerKw[m]), 0, 2);
        }
    }

    /// <summary>
    /// The public price forecast at a horizon slot, $ per kWh: a time-of-use tariff's own published schedule; for a
    /// real-time tariff its model's deterministic daily shape (the drawn deviations and spikes are not known ahead);
    /// any other tariff's price at the slot.
    /// </summary>
    /// <param name="tariff">The tariff.</param>
    /// <param name="slot">Horizon slot.</param>
    public static double PublicForecast(ITariff tariff, int slot)
    {
        ArgumentNullException.ThrowIfNull(tariff);
        return tariff is RealTimeTariff rt ? rt.Model.Shape(SlotCalendar.SlotOfDay(slot)) : tariff.PriceAt(slot);
    }

    /// <summary>
    /// Each household's energy still owed, priced at public forecast prices, $ (the shaping potential Ψ, see
    /// <see cref="HouseholdTaskOptions.ShapingDiscount"/>): vehicle energy still to deliver × the cheapest forecast price
    /// before its departure, plus the tank's deficit below its setpoint energy × the mean forecast price of the next
    /// <see cref="LookAheadSlots"/> slots. Uses only the household's own state and the public tariff.
    /// </summary>
    /// <param name="owed">Receives one value per household.</param>
    public void EnergyOwedDollars(Span<double> owed)
    {
        int n = _env.HouseholdCount;
        if (owed.Length != n) throw new ArgumentException($"owed needs {n} values", nameof(owed));
        if (_env.Done)
        {
            owed.Clear();
            return;
        }
        int slot = _env.Slot;
        ReadOnlySpan<double> remaining = _env.DeferrableRemainingKwh, tank = _env.TankEnergyKwh;
        for (int m = 0; m < n; m++)
        {
            double v = 0;
            ChargingSession? session = _env.CurrentSession(m);
            if (session is not null && remaining[m] > 0)
            {
                int end = Math.Clamp(session.DeadlineSlot, slot + 1, _forecast.Length);
                double cheapest = double.PositiveInfinity;
                for (int u = slot; u < end; u++) cheapest = Math.Min(cheapest, _forecast[u]);
                v += remaining[m] * cheapest;
            }
            if (_tank[m] is { } t)
                v += Math.Max(0, t.SetpointEnergyKwh - tank[m]) * _aheadMean[slot];
            owed[m] = v;
        }
    }

    /// <inheritdoc />
    public void GetBounds(Span<float> lower, Span<float> upper)
    {
        ReadOnlySpan<double> min = _env.FlexMinKw, des = _env.FlexDesiredKw;
        for (int m = 0; m < _env.HouseholdCount; m++)
        {
            lower[m] = (float)min[m];
            upper[m] = (float)des[m];
        }
    }

    /// <summary>
    /// Applies the proposals (kW; clamped into each household's box, since the float bounds round the environment's),
    /// projects them when they break a feeder limit, steps the environment and writes each household's bill + discomfort.
    /// </summary>
    /// <returns>True at the end of each day (and of the horizon).</returns>
    public bool Step(ReadOnlySpan<float> actions, Span<float> costs)
    {
        int n = _env.HouseholdCount;
        if (actions.Length != n || costs.Length != n) throw new ArgumentException($"actions and costs need {n} floats each");
        if (_env.Done) throw new InvalidOperationException("the horizon is over; call Reset");
        ReadOnlySpan<double> min = _env.FlexMinKw, des = _env.FlexDesiredKw;
        for (int m = 0; m < n; m++)
            _setpoints[m] = Math.Clamp((double)actions[m], min[m], des[m]);
        if (_projector is not null) Project();
        double? shaping = Options.ShapingDiscount;
        if (shaping is not null) EnergyOwedDollars(_potential);
        _env.Step(_setpoints, _step);
        double bill = _step.TotalBillDollars, discomfort = _step.TotalDiscomfortDollars;
        for (int m = 0; m < n; m++)
            costs[m] = (float)(_step.BillDollars[m] + _step.DiscomfortDollars[m]);
        if (shaping is { } gamma)
        {
            for (int m = 0; m < n; m++) costs[m] -= (float)_potential[m];
            EnergyOwedDollars(_potential);
            for (int m = 0; m < n; m++) costs[m] += (float)(gamma * _potential[m]);
        }
        _cost += bill + discomfort;
        _bill += bill;
        _discomfort += discomfort;
        _peak = Math.Max(_peak, _step.SubstationImportKw);
        if (_step.ViolationCount > 0) _violationSlots++;
        _daySlots++;
        bool dayOver = _daySlots == SlotCalendar.SlotsPerDay || _env.Done;
        if (dayOver)
            LastDay = new DayMetrics(_dayIndex + 1, _cost, _bill, _discomfort, _peak, _violationSlots, _projections,
                new ProjectionCounts(_unverified, _infeasible, _failures));
        return dayOver;
    }

    private void Project()
    {
        ProjectionInput input = _input!;
        ReadOnlySpan<double> baseKw = _env.BaseKw, min = _env.FlexMinKw, des = _env.FlexDesiredKw;
        _fixedKw.CopyTo(input.BaseLoadKw, 0);
        _fixedKvar.CopyTo(input.BaseLoadKvar, 0);
        for (int m = 0; m < _env.HouseholdCount; m++)
        {
            input.BaseLoadKw[_householdBus[m]] += baseKw[m];
            input.BaseLoadKvar[_householdBus[m]] += baseKw[m] * _kvarPerKw[m];
            input.MinKw[m] = min[m];
            input.MaxKw[m] = des[m];
            input.ProposalKw[m] = _setpoints[m];
        }
        _projector!.Project(input, _projection!);
        switch (_projection!.Status)
        {
            case ProjectionStatus.AlreadyFeasible:
                return;
            case ProjectionStatus.Projected:
                break;
            case ProjectionStatus.Unverified:
                _unverified++;
                break;
            case ProjectionStatus.Infeasible:
                _infeasible++;
                return; // nothing inside the boxes fits: the proposal goes ahead and the slot counts as a violation
            default:
                _failures++;
                return;
        }
        _projections++;
        for (int m = 0; m < _env.HouseholdCount; m++)
            _setpoints[m] = Math.Clamp(_projection.SetpointKw[m], min[m], des[m]);
    }

    private void ClearDay()
    {
        _cost = _bill = _discomfort = 0;
        _peak = double.NegativeInfinity;
        _violationSlots = _projections = _unverified = _infeasible = _failures = _daySlots = 0;
    }
}
