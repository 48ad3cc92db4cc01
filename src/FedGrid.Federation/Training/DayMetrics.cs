using System.Collections.Immutable;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Federation.Training;

/// <summary>How the projections of a day that did not end feasible went (all zero on a clean day).</summary>
/// <param name="Unverified">Projected, but the exact AC check still found a violation.</param>
/// <param name="Infeasible">No setpoints inside the boxes fit the limits; the proposal went ahead.</param>
/// <param name="SolverFailures">The cone solver stopped without an answer; the setpoints fell back to every household at its minimum when that passed the exact AC check, else the proposal went ahead.</param>
public sealed record ProjectionCounts(int Unverified, int Infeasible, int SolverFailures)
{
    /// <summary>No trouble.</summary>
    public static ProjectionCounts None { get; } = new(0, 0, 0);
}

/// <summary>One simulated day of a run, summed over households.</summary>
/// <param name="Day">Day number, 1-based.</param>
/// <param name="Cost">Bill + discomfort, $.</param>
/// <param name="Bill">Sum of household bills, $.</param>
/// <param name="Discomfort">Sum of household discomfort, $.</param>
/// <param name="PeakKw">Highest substation import of the day, kW.</param>
/// <param name="ViolationSlots">Slots with at least one broken feeder limit (after projection).</param>
/// <param name="Projections">Slots whose proposals the safety projection changed.</param>
/// <param name="ProjectionTrouble">Projections that did not end verified.</param>
public sealed record DayMetrics(int Day, double Cost, double Bill, double Discomfort, double PeakKw, int ViolationSlots, int Projections,
    ProjectionCounts ProjectionTrouble);

/// <summary>The no-control baseline on the same days as a learner.</summary>
public static class NoControlBaseline
{
    /// <summary>Runs <see cref="NoControlPolicy"/> (no projection: what happens without the program) over the scenario, one <see cref="DayMetrics"/> per day.</summary>
    /// <param name="scenario">The scenario the learner trains on.</param>
    public static ImmutableArray<DayMetrics> Run(Scenario scenario)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        var env = new DemandResponseEnvironment(scenario);
        var (_, slots) = PolicyRun.Run(env, new NoControlPolicy());
        return PerDay(slots);
    }

    /// <summary>Sums per-slot records into days (a partial last day counts as a day).</summary>
    /// <param name="slots">Records in slot order from slot 0.</param>
    public static ImmutableArray<DayMetrics> PerDay(IReadOnlyList<SlotRecord> slots)
    {
        ArgumentNullException.ThrowIfNull(slots);
        int days = (slots.Count + SlotCalendar.SlotsPerDay - 1) / SlotCalendar.SlotsPerDay;
        var result = ImmutableArray.CreateBuilder<DayMetrics>(days);
        for (int d = 0; d < days; d++)
        {
            double bill = 0, discomfort = 0, peak = double.NegativeInfinity;
            int violations = 0;
            for (int t = d * SlotCalendar.SlotsPerDay; t < Math.Min(slots.Count, (d + 1) * SlotCalendar.SlotsPerDay); t++)
            {
                SlotRecord r = slots[t];
                bill += r.BillDollars;
                discomfort += r.DiscomfortDollars;
                peak = Math.Max(peak, r.SubstationImportKw);
                if (r.ViolationCount > 0) violations++;
            }
            result.Add(new DayMetrics(d + 1, bill + discomfort, bill, discomfort, peak, violations, 0, ProjectionCounts.None));
        }
        return result.MoveToImmutable();
    }
}
