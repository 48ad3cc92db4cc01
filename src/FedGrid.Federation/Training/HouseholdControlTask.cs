using FedGrid.Grid.Projection;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;
using FedGrid.Learning.Tasks;

namespace FedGrid.Federation.Training;

/// <summary>Settings of <see cref="HouseholdControlTask"/>.</summary>
/// <param name="Project">Project every slot's proposals onto the feeder limits with <see cref="SetpointProjector"/> (the coordinator's safety projection).</param>
/// <param name="Projection">Projector settings, or null for the defaults.</param>
public sealed record HouseholdTaskOptions(bool Project = true, ProjectionOptions? Projection = null)
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

    /// <summary>
    /// The per-household features, in order. Public information: price, time of day (as sin/cos of the daily angle),
    /// weekend flag. The household's own information: its base load, flexible minimum and desired power (the box),
    /// the vehicle energy still to deliver and the hours to its departure (both 0 without a session: they tell the
    /// policy how much of the box is deferrable and for how long), and the tank's charge between its lower comfort
    /// (0) and setpoint (1) energy (0 without a tank: how much pre-heating is possible).
    /// </summary>
    public static IReadOnlyList<string> FeatureNames { get; } =
    [
        "baseKw/5", "flexMinKw/5", "flexDesiredKw/5", "price/0.25", "sin(time of day)", "cos(time of day)", "weekend",
        "deferrableRemainingKwh/10", "hoursToDeparture/12", "tankCharge",
    ];

    private const int Features = 10;
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
        var units = new FlexibleUnit[n];
        for (int m = 0; m < n; m++)
        {
            Household h = scenario.Households[m];
            _householdBus[m] = scenario.Feeder.IndexOf(h.BusId);
            _kvarPerKw[m] = h.KvarPerKw;
            _tank[m] = h.Thermal;
            units[m] = new FlexibleUnit(h.Id, h.BusId, h.KvarPerKw);
        }
        _fixedKw = new double[buses];
        _fixedKvar = new double[buses];
        foreach (FixedBusLoad f in scenario.FixedLoads)
        {
            int b = scenario.Feeder.IndexOf(f.BusId);
            _fixedKw[b] += f.Kw;
            _fixedKvar[b] += f.Kvar;
        }
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
    public int StateSizePerAgent => Features;

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
        if (state.Length != n * Features) throw new ArgumentException($"state needs {n * Features} floats", nameof(state));
        ReadOnlySpan<double> baseKw = _env.BaseKw, min = _env.FlexMinKw, des = _env.FlexDesiredKw;
        ReadOnlySpan<double> remaining = _env.DeferrableRemainingKwh, tank = _env.TankEnergyKwh;
        int slot = Math.Min(_env.Slot, _env.SlotCount - 1);
        double angle = 2 * Math.PI * SlotCalendar.SlotOfDay(slot) / SlotCalendar.SlotsPerDay;
        float price = (float)(_env.PricePerKwh / PriceScale), sin = (float)Math.Sin(angle), cos = (float)Math.Cos(angle);
        float weekend = _env.Scenario.Calendar.IsWeekend(slot) ? 1f : 0f;
        for (int m = 0; m < n; m++)
        {
            Span<float> x = state.Slice(m * Features, Features);
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
        _env.Step(_setpoints, _step);
        double bill = _step.TotalBillDollars, discomfort = _step.TotalDiscomfortDollars;
        for (int m = 0; m < n; m++)
            costs[m] = (float)(_step.BillDollars[m] + _step.DiscomfortDollars[m]);
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
