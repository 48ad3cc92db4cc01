using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;

namespace FedGrid.Federation.Tests;

public class OracleBaselineTests
{
    [Fact]
    public void Last_day_optimum_starts_from_no_control_and_bounds_it_from_below()
    {
        Scenario twoDays = DefaultScenario.Create(DefaultScenario.DefaultSeed, 2);
        var days = new List<int>();
        var oracle = OracleBaseline.LastDays(twoDays, 1, days.Add);
        Assert.Equal(2, oracle.Length);
        Assert.True(double.IsNaN(oracle[0]));
        Assert.Equal([1], days);
        // Day 2 starts from the no-control state at its midnight for both, so no control's day-2 cost is a feasible
        // schedule's cost from that state: the optimum (a lower bound) cannot exceed it.
        var noControl = NoControlBaseline.Run(twoDays);
        Assert.True(oracle[1] > 0);
        Assert.True(oracle[1] <= noControl[1].Cost + 1e-6, $"optimum {oracle[1]} above no control {noControl[1].Cost}");
        Assert.Throws<ArgumentOutOfRangeException>(() => OracleBaseline.LastDays(twoDays, 3));
    }

    [Fact]
    public void Summary_needs_the_optimum_on_every_day_of_the_final_window()
    {
        var days = Enumerable.Range(1, 3).Select(d => new DayMetrics(d, 90, 90, 0, 10, 0, 0, ProjectionCounts.None)).ToList();
        var nc = Enumerable.Range(1, 3).Select(d => new DayMetrics(d, 100, 100, 0, 10, 0, 0, ProjectionCounts.None)).ToList();
        var run = new TrainingRun("q-learning", [.. days], 288, 1, TimeSpan.Zero);
        var partial = TrainingSummary.Create("centralized", run, nc, [double.NaN, 80, 80], "t", "s", 1, 1);
        Assert.Null(partial.OracleDailyCost); // the 3-day window includes day 1, which was not solved
        var full = TrainingSummary.Create("centralized", run, nc, [80.0, 80, 80], "t", "s", 1, 1);
        Assert.Equal(50, full.SavingsCapturedPct!.Value, 9);
    }
}
