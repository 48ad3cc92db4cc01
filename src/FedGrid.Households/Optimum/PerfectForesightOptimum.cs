using System.Collections.Immutable;
using System.Diagnostics;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.Optimization;
using FedGrid.Grid.PowerFlow;
using FedGrid.Grid.Projection;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Households.Optimum;

/// <summary>Settings of <see cref="PerfectForesightOptimum"/>.</summary>
/// <param name="LossWeightPerKw">$ per kW of line losses per slot added to the program's objective (not to the reported cost): a small positive weight makes the cone relaxation exact (Farivar &amp; Low 2013).</param>
/// <param name="Solver">Interior-point settings.</param>
public sealed record OptimumOptions(double LossWeightPerKw = 1e-4, SolverOptions? Solver = null)
{
    /// <summary>The default settings.</summary>
    public static OptimumOptions Default { get; } = new();
}

/// <summary>
/// The perfect-foresight optimum of one window of slots (normally one day).
/// </summary>
/// <param name="Day">Day index of the window's first slot.</param>
/// <param name="FirstSlot">Horizon slot the window starts at.</param>
/// <param name="SlotCount">Slots in the window.</param>
/// <param name="Status">How the interior-point solve ended.</param>
/// <param name="CostDollars">Optimal objective: <see cref="BillDollars"/> + <see cref="DiscomfortDollars"/> — a lower bound on the cost any policy reaches over the window from the same state.</param>
/// <param name="BillDollars">Σ price × household kWh at the optimum, $.</param>
/// <param name="DiscomfortDollars">Discomfort as the program prices it (the one concave term under-estimated, see <see cref="PerfectForesightOptimum"/>), $.</param>
/// <param name="ExactDiscomfortDollars">Discomfort of the optimal schedule with the environment's own formulas, $ (≥ <see cref="DiscomfortDollars"/>).</param>
/// <param name="PeakKw">Highest substation import of the schedule (exact AC power flow), kW.</param>
/// <param name="ViolationSlots">Slots whose exact AC power flow breaks a limit (tolerance 1e-6 pu).</param>
/// <param name="MaxRelaxationGapPu">Largest cone relaxation gap ℓ·v − P² − Q² over lines and slots, pu².</param>
/// <param name="SolveMs">Wall time of the interior-point solve, ms.</param>
/// <param name="BuildMs">Wall time of building the program, ms.</param>
/// <param name="Iterations">Interior-point iterations.</param>
/// <param name="Variables">Variables of the program.</param>
/// <param name="Constraints">Equality rows plus cone rows of the program.</param>
/// <param name="HouseholdSetpointsKw">Household flexible setpoints, [slot × households + household], kW.</param>
/// <param name="ApplianceSetpointsKw">Appliance powers, [(slot × households + household) × 3 + kind] (see <see cref="ApplianceKind"/>), kW.</param>
public sealed record OptimumDay(int Day, int FirstSlot, int SlotCount, SolverStatus Status, double CostDollars, double BillDollars,
    double DiscomfortDollars, double ExactDiscomfortDollars, double PeakKw, int ViolationSlots, double MaxRelaxationGapPu,
    double SolveMs, double BuildMs, int Iterations, int Variables, int Constraints,
    ImmutableArray<double> HouseholdSetpointsKw, ImmutableArray<double> ApplianceSetpointsKw)
{
    /// <summary>Bill plus the exact discomfort of the optimal schedule, $ (what the environment charges for it).</summary>
    public double ExactCostDollars => BillDollars + ExactDiscomfortDollars;
}

/// <summary>
/// The perfect-foresight optimum: for a window of slots (one day by default) with everything known —
/// base loads, hot-water draws, curtailable demand, charging sessions, prices — the convex program
/// <code>
///   minimise  Σ_t Σ_m price_t·(base + flexible)·Δt + discomfort
///   over      the power of every appliance in every slot,
/// </code>
/// subject to the appliances' dynamics and boxes and, in every slot, the feeder's limits through the
/// second-order-cone relaxation of the branch flow model (<see cref="ConeRelaxationFormulation"/>, reused
/// slot by slot), solved with <see cref="InteriorPointSolver"/>.
/// <para>Per appliance (Δt = 0.25 h, A = charger kW × Δt):</para>
/// <list type="bullet">
/// <item>Deferrable: remaining energy R_t = R_{t−1} − p_t·Δt ≥ 0 (so p_t ≤ desired), 0 ≤ p_t ≤ charger kW, and
/// R_t ≤ A·(D − t − 1) — exactly the environment's minimum ("still finishable at full power"). At the deadline
/// slot R = 0. A session that cannot be finished even at full power from its start runs at full power (its
/// minimum equals its desired power) and pays the unmet-energy penalty, both constants.
/// Deferral discomfort, exactly: w·[(kW − p_t)·Δt − (A − R_{t−1})⁺]; the last term is concave in the state
/// (finishing early ends the charge), so the program replaces (A − R)⁺ by its chord over R ∈ [0, R̄_t]
/// (R̄_t the largest remaining the session can have at t) — an over-estimate of the term subtracted, so the
/// program's discomfort is a lower bound of the exact one (<see cref="OptimumDay.ExactDiscomfortDollars"/>).</item>
/// <item>Thermal: the environment's linear tank balance, 0 ≤ p ≤ heater kW, stored energy ≤ setpoint energy (the
/// desired bound), shortfall u ≥ lower-comfort energy − E, u ≥ 0, priced at the shortfall weight. The
/// environment's minimum ("enough to stay comfortable, or full power") is a disjunction and is left out (a
/// relaxation); comfort is enforced by the shortfall price, and the replay clamps into the box.</item>
/// <item>Curtailable: min fraction × desired ≤ p ≤ desired, discomfort w·(desired − p)·Δt (exact).</item>
/// </list>
/// <para>
/// Each appliance is scheduled on its own: the environment's <see cref="DemandResponseEnvironment.SplitRule"/>
/// (a household setpoint split by priority) makes the set of reachable appliance powers nonconvex, so the
/// program relaxes it — the optimum is a lower bound for any household-setpoint policy — and is replayed with
/// <see cref="DemandResponseEnvironment.StepAppliances"/>.
/// </para>
/// <para>
/// Midnight convention (matches the environment): a window starts from the environment's state at its first
/// slot (remaining energy of the session in progress, tank energy); what is unfinished at the window's end is
/// carried — the environment charges nothing at midnight, and the deadline constraint keeps every session
/// finishable. <see cref="Run"/> chains the days: day d starts where the replay of day d − 1 left the environment.
/// A day's cost is a lower bound for that day from that state (any policy's day from the same state is a feasible
/// point). Because midnight costs nothing, a day's program may leave charging to the next day, which then pays for
/// it; the whole horizon solved as one window (<see cref="SolveWindow"/> with every slot) is the lower bound of any
/// policy's total from the start, and on the default week is about 1 % below the chained days.
/// </para>
/// </summary>
public sealed class PerfectForesightOptimum
{
    private const int Kinds = 3;
    private readonly Scenario _scenario;
    private readonly OptimumOptions _options;

    /// <summary>Prepares the optimum for a scenario.</summary>
    public PerfectForesightOptimum(Scenario scenario, OptimumOptions? options = null)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        scenario.Validate();
        _scenario = scenario;
        _options = options ?? OptimumOptions.Default;
    }

    /// <summary>The scenario.</summary>
    public Scenario Scenario => _scenario;

    /// <summary>
    /// Solves the window of <paramref name="slotCount"/> slots starting at the environment's current slot, from its
    /// current state. The environment is not advanced.
    /// </summary>
    /// <exception cref="ArgumentException">The environment belongs to another scenario, or the window leaves the horizon.</exception>
    public OptimumDay SolveWindow(DemandResponseEnvironment environment, int slotCount = SlotCalendar.SlotsPerDay)
    {
        ArgumentNullException.ThrowIfNull(environment);
        if (!ReferenceEquals(environment.Scenario, _scenario)) throw new ArgumentException("the environment runs another scenario", nameof(environment));
        int start = environment.Slot;
        if (slotCount <= 0 || start + slotCount > _scenario.SlotCount)
            throw new ArgumentException($"window of {slotCount} slots from slot {start} leaves the horizon of {_scenario.SlotCount} slots", nameof(slotCount));
        var watch = Stopwatch.StartNew();
        var model = new WindowModel(_scenario, environment, start, slotCount, _options.LossWeightPerKw);
        double buildMs = watch.Elapsed.TotalMilliseconds;
        watch.Restart();
        var solver = new InteriorPointSolver(model.Program, _options.Solver);
        SolverResult res = solver.Solve();
        double solveMs = watch.Elapsed.TotalMilliseconds;
        return model.Read(solver.X, res, buildMs, solveMs);
    }

    /// <summary>
    /// The cone program <see cref="SolveWindow"/> would solve from the environment's current state, for export
    /// (<see cref="ConeProgramExchange"/>) to an outside solver. Its objective is the window's cost plus the small loss term
    /// (<see cref="OptimumOptions.LossWeightPerKw"/>).
    /// </summary>
    public ConeProgram BuildProgram(DemandResponseEnvironment environment, int slotCount = SlotCalendar.SlotsPerDay)
    {
        ArgumentNullException.ThrowIfNull(environment);
        if (!ReferenceEquals(environment.Scenario, _scenario)) throw new ArgumentException("the environment runs another scenario", nameof(environment));
        int start = environment.Slot;
        if (slotCount <= 0 || start + slotCount > _scenario.SlotCount)
            throw new ArgumentException($"window of {slotCount} slots from slot {start} leaves the horizon of {_scenario.SlotCount} slots", nameof(slotCount));
        return new WindowModel(_scenario, environment, start, slotCount, _options.LossWeightPerKw).Program;
    }

    /// <summary>
    /// Resets <paramref name="environment"/> and, day after day, solves the day from the environment's state at midnight
    /// and replays its appliance schedule through <see cref="DemandResponseEnvironment.StepAppliances"/>.
    /// </summary>
    /// <param name="environment">An environment of this optimum's scenario.</param>
    /// <param name="days">Days to run (at most the horizon's whole days; null = all).</param>
    /// <param name="progress">Called after each day with the number of days done, or null.</param>
    public ImmutableArray<OptimumDayRun> Run(DemandResponseEnvironment environment, int? days = null, Action<int>? progress = null)
    {
        ArgumentNullException.ThrowIfNull(environment);
        int whole = _scenario.SlotCount / SlotCalendar.SlotsPerDay;
        int count = days ?? whole;
        if (count <= 0 || count > whole) throw new ArgumentOutOfRangeException(nameof(days), $"days must be in 1..{whole}, got {count}");
        environment.Reset();
        var list = ImmutableArray.CreateBuilder<OptimumDayRun>(count);
        for (int d = 0; d < count; d++)
        {
            OptimumDay day = SolveWindow(environment);
            list.Add(new OptimumDayRun(day, Replay(environment, day)));
            progress?.Invoke(d + 1);
        }
        return list.MoveToImmutable();
    }

    /// <summary>
    /// Steps <paramref name="environment"/> (at the window's first slot) through the window with the optimum's appliance
    /// powers, each clamped into its appliance's box (the solver's tolerance can leave it a hair outside), and sums what the
    /// environment charges.
    /// </summary>
    public static ReplayFigures Replay(DemandResponseEnvironment environment, OptimumDay day)
    {
        ArgumentNullException.ThrowIfNull(environment);
        ArgumentNullException.ThrowIfNull(day);
        if (environment.Slot != day.FirstSlot) throw new ArgumentException($"environment is at slot {environment.Slot}, the window starts at {day.FirstSlot}", nameof(environment));
        int n = environment.HouseholdCount;
        var powers = new double[n * Kinds];
        StepResult r = environment.CreateResult();
        double bill = 0, discomfort = 0, peak = double.NegativeInfinity, clamp = 0;
        int violating = 0;
        for (int k = 0; k < day.SlotCount; k++)
        {
            for (int m = 0; m < n; m++)
                for (int a = 0; a < Kinds; a++)
                {
                    var (lo, hi) = environment.ApplianceBounds(m, (ApplianceKind)a);
                    double want = day.ApplianceSetpointsKw[(k * n + m) * Kinds + a];
                    double got = Math.Clamp(want, lo, Math.Max(lo, hi));
                    clamp = Math.Max(clamp, Math.Abs(got - want));
                    powers[m * Kinds + a] = got;
                }
            environment.StepAppliances(powers, r);
            bill += r.TotalBillDollars;
            discomfort += r.TotalDiscomfortDollars;
            peak = Math.Max(peak, r.SubstationImportKw);
            if (r.ViolationCount > 0) violating++;
        }
        return new ReplayFigures(bill, discomfort, peak, violating, clamp);
    }
}

/// <summary>What the environment charged when an optimum's schedule was replayed.</summary>
/// <param name="BillDollars">Σ bills, $.</param>
/// <param name="DiscomfortDollars">Σ discomfort, $.</param>
/// <param name="PeakKw">Highest substation import, kW.</param>
/// <param name="ViolationSlots">Slots with a broken limit.</param>
/// <param name="MaxClampKw">Largest change made to put a power into its appliance's box, kW.</param>
public sealed record ReplayFigures(double BillDollars, double DiscomfortDollars, double PeakKw, int ViolationSlots, double MaxClampKw)
{
    /// <summary>Bill plus discomfort, $.</summary>
    public double CostDollars => BillDollars + DiscomfortDollars;
}

/// <summary>One day of <see cref="PerfectForesightOptimum.Run"/>: the optimum and what its replay cost.</summary>
/// <param name="Optimum">The day's optimum.</param>
/// <param name="Replay">The environment's figures for its schedule.</param>
public sealed record OptimumDayRun(OptimumDay Optimum, ReplayFigures Replay);
