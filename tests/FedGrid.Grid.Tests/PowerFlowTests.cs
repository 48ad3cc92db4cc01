using FedGrid.Grid.Feeders;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Grid.Tests;

public sealed class PowerFlowTests
{
    [Fact]
    public void Baran_Wu_33_base_case_matches_published_loss_and_minimum_voltage()
    {
        // Baran & Wu (1989), 33-bus feeder, base case: total real loss 202.7 kW and minimum voltage
        // 0.9131 pu at bus 18 (published values, from memory).
        Feeder f = FeederFile.Load(RepoPaths.Sample("baran-wu-33.json"));
        PowerFlowResult r = new AcPowerFlow(f.Network).SolveBaseCase();
        Assert.True(r.Converged);
        Assert.InRange(f.Network.ToKw(r.LossPu), 202.7 - 0.5, 202.7 + 0.5);
        Assert.Equal("18", f.Buses[r.MinVoltageBus].Id);
        Assert.InRange(r.MinVoltagePu, 0.9131 - 0.0005, 0.9131 + 0.0005);
    }

    [Fact]
    public void Power_balance_holds_substation_import_is_load_plus_loss()
    {
        Feeder f = FeederGenerator.Generate(330, seed: 3);
        PowerFlowResult r = new AcPowerFlow(f.Network).SolveBaseCase();
        Assert.True(r.Converged);
        double load = f.Buses.Sum(b => b.LoadPkW);
        Assert.Equal(load + f.Network.ToKw(r.LossPu), f.Network.ToKw(r.SubstationPPu), 6);
    }

    [Fact]
    public void Absurd_load_on_a_long_line_is_reported_as_not_converged()
    {
        // 50 ohm of resistance at 12.47 kV can deliver at most V²/(4R) ≈ 0.78 MW (maximum power
        // transfer, a textbook bound); 5 MW has no power-flow solution.
        var buses = new[] { new Bus("s", "s", 12.47, 0, 0, 0.95, 1.05), new Bus("far", "far", 12.47, 5000, 1000, 0.95, 1.05) };
        Feeder f = Feeder.Create("long", buses, [new Line("s", "far", 50, 10, 400)], new Substation("s", 1.0, 10000));
        var result = new PowerFlowResult(2);
        bool ok = new AcPowerFlow(f.Network).Solve(f.Network.LoadP, f.Network.LoadQ, result);
        Assert.False(ok);
        Assert.False(result.Converged);
        Assert.True(result.Iterations >= 1);
    }

    [Fact]
    public void Same_line_with_a_feasible_load_converges()
    {
        // Counterpart of the case above: 0.2 MW is well inside the 0.78 MW bound.
        var buses = new[] { new Bus("s", "s", 12.47, 0, 0, 0.95, 1.05), new Bus("far", "far", 12.47, 200, 40, 0.95, 1.05) };
        Feeder f = Feeder.Create("long", buses, [new Line("s", "far", 50, 10, 400)], new Substation("s", 1.0, 10000));
        Assert.True(new AcPowerFlow(f.Network).SolveBaseCase().Converged);
    }

    [Fact]
    public void Baran_Wu_base_case_violations_are_the_undervoltage_buses()
    {
        Feeder f = FeederFile.Load(RepoPaths.Sample("baran-wu-33.json"));
        PowerFlowResult r = new AcPowerFlow(f.Network).SolveBaseCase();
        var v = r.FindViolations(f);
        var expected = Enumerable.Range(0, 33).Where(i => r.VoltagePu[i] < 0.95).Select(i => f.Buses[i].Id).ToHashSet();
        Assert.NotEmpty(expected);
        Assert.All(v, x => Assert.Equal(ViolationKind.UnderVoltage, x.Kind));
        Assert.Equal(expected, v.Select(x => x.Element).ToHashSet());
        LimitViolation at18 = v.Single(x => x.Element == "18");
        Assert.Equal(r.VoltagePu[f.IndexOf("18")], at18.Value);
        Assert.Equal((0.95, "pu"), (at18.Limit, at18.Unit));
    }

    [Fact]
    public void Overcurrent_overimport_and_overvoltage_are_found()
    {
        string text = FeederFileTests.SmallFeeder
            .Replace("\"ampacityA\": 200", "\"ampacityA\": 10", StringComparison.Ordinal)
            .Replace("\"importLimitKw\": 900", "\"importLimitKw\": 100", StringComparison.Ordinal)
            .Replace("\"voltagePu\": 1.02", "\"voltagePu\": 1.07", StringComparison.Ordinal);
        Feeder f = FeederFile.Parse(text, "small.json");
        PowerFlowResult r = new AcPowerFlow(f.Network).SolveBaseCase();
        Assert.True(r.Converged);
        var v = r.FindViolations(f);

        LimitViolation oc = Assert.Single(v, x => x.Kind == ViolationKind.LineOverCurrent);
        Assert.Equal("a-b", oc.Element);
        // |I| = |S| / (√3 |V|) at the sending end of line a-b, in A.
        int b = f.IndexOf("b");
        double sKva = f.Network.ToKw(Math.Sqrt(r.BranchPPu[b] * r.BranchPPu[b] + r.BranchQPu[b] * r.BranchQPu[b]));
        Assert.Equal(sKva / (Math.Sqrt(3) * 1.07 * 12.47), oc.Value, 6);
        Assert.Equal((10.0, "A"), (oc.Limit, oc.Unit));

        LimitViolation imp = Assert.Single(v, x => x.Kind == ViolationKind.SubstationOverImport);
        Assert.Equal("a", imp.Element);
        Assert.Equal(500.5 + f.Network.ToKw(r.LossPu), imp.Value, 6);
        Assert.Equal((100.0, "kW"), (imp.Limit, imp.Unit));

        LimitViolation ov = Assert.Single(v, x => x.Kind == ViolationKind.OverVoltage && x.Element == "a");
        Assert.Equal(1.07, ov.Value, 12);
        Assert.Equal(1.05, ov.Limit);

        // The allocation-free count applies the same rule as the list.
        Assert.Equal(v.Count, r.CountViolations(f.Network));
        Assert.Equal(r.FindViolations(f, 0.5).Count, r.CountViolations(f.Network, 0.5));
    }

    [Fact]
    public void A_feeder_within_limits_has_no_violations()
    {
        Feeder f = FeederFile.Parse(FeederFileTests.SmallFeeder, "small.json");
        PowerFlowResult r = new AcPowerFlow(f.Network).SolveBaseCase();
        Assert.Empty(r.FindViolations(f));
        Assert.Equal(0, r.CountViolations(f.Network));
    }
}
