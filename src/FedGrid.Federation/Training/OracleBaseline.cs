using System.Collections.Immutable;
using FedGrid.Households;
using FedGrid.Households.Optimum;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Federation.Training;

/// <summary>
/// The perfect-foresight optimum on the same days as a learner, over the last <c>days</c> days of the horizon (the
/// window the summary scores; a day's program takes about a second or two, so the whole of a long run is not solved):
/// the environment runs without control up to the window's first midnight, then each day is solved from the state at
/// its midnight with all of its data known (<see cref="PerfectForesightOptimum.SolveWindow"/>) and replayed
/// (<see cref="PerfectForesightOptimum.Replay"/>), so day d + 1 starts where the optimum's day d left off. A day's
/// figure is the program's optimum (<see cref="OptimumDay.CostDollars"/>): bill + discomfort as the program prices it,
/// the lower bound a policy is scored against.
/// </summary>
public static class OracleBaseline
{
    /// <summary>Solves the last <paramref name="days"/> whole days of the scenario.</summary>
    /// <param name="scenario">The scenario the learner trains on.</param>
    /// <param name="days">Days at the end of the horizon (at most its whole days).</param>
    /// <param name="progress">Called after each day with the number of days done, or null.</param>
    /// <returns>One entry per horizon day: the optimum's daily cost for the solved days, NaN before them.</returns>
    public static ImmutableArray<double> LastDays(Scenario scenario, int days, Action<int>? progress = null)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        int whole = scenario.SlotCount / SlotCalendar.SlotsPerDay;
        ArgumentOutOfRangeException.ThrowIfLessThan(days, 1);
        ArgumentOutOfRangeException.ThrowIfGreaterThan(days, whole);
        var env = new DemandResponseEnvironment(scenario);
        var none = new NoControlPolicy();
        var setpoints = new double[env.HouseholdCount];
        StepResult r = env.CreateResult();
        int first = whole - days;
        while (env.Slot < first * SlotCalendar.SlotsPerDay)
        {
            none.Decide(env, setpoints);
            env.Step(setpoints, r);
        }
        var optimum = new PerfectForesightOptimum(scenario);
        var costs = new double[whole];
        Array.Fill(costs, double.NaN);
        for (int d = first; d < whole; d++)
        {
            OptimumDay day = optimum.SolveWindow(env);
            PerfectForesightOptimum.Replay(env, day);
            costs[d] = day.CostDollars;
            progress?.Invoke(d - first + 1);
        }
        return [.. costs];
    }
}
