using System.Text.Json;
using FedGrid.Cli.Commands;

namespace FedGrid.Cli.Tests;

public class OptimumCommandTests
{
    [Fact]
    public void Json_has_per_day_oracle_figures_below_both_baselines()
    {
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int code = OptimumCommand.Run(new OptimumCommandOptions(1, 20261201, Json: true), stdout, stderr);
        Assert.Equal(0, code);
        using var doc = JsonDocument.Parse(stdout.ToString()); // stdout holds only the JSON
        var root = doc.RootElement;
        Assert.Equal(1, root.GetProperty("dayCount").GetInt32());
        Assert.Equal(32, root.GetProperty("households").GetInt32());
        var day = root.GetProperty("days")[0];
        foreach (string f in (string[])["costDollars", "billDollars", "discomfortDollars", "replayCostDollars", "peakKw", "violationSlots",
                     "maxRelaxationGapPu", "solveMs", "iterations", "variables", "constraints", "noControlCostDollars", "ruleCostDollars"])
            Assert.Equal(JsonValueKind.Number, day.GetProperty(f).ValueKind);
        Assert.Equal("Optimal", day.GetProperty("status").GetString());
        double cost = day.GetProperty("costDollars").GetDouble();
        // Day 0 starts from the same state for every policy, so the optimum is a lower bound of both baselines.
        Assert.True(cost <= day.GetProperty("noControlCostDollars").GetDouble());
        Assert.True(cost <= day.GetProperty("ruleCostDollars").GetDouble());
        Assert.Equal(day.GetProperty("billDollars").GetDouble() + day.GetProperty("discomfortDollars").GetDouble(), cost, 9);
        Assert.Equal(cost, root.GetProperty("chainedDailyCost").GetDouble(), 9);
        // One day: the whole-horizon program is the day's program.
        Assert.Equal(cost, root.GetProperty("oracleDailyCost").GetDouble(), 6);
        Assert.Equal(day.GetProperty("variables").GetInt32(), root.GetProperty("horizon").GetProperty("variables").GetInt32());
        Assert.Equal(0, day.GetProperty("violationSlots").GetInt32());
        Assert.True(day.GetProperty("maxRelaxationGapPu").GetDouble() < 1e-5);
        Assert.Contains("optimum: day 1/1", stderr.ToString());
    }

    [Fact]
    public void Bad_days_is_a_user_error()
    {
        Assert.Throws<UserInputException>(() => OptimumCommand.Run(new OptimumCommandOptions(0, 1, false), new StringWriter(), new StringWriter()));
    }
}
