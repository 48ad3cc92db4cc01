using FedGrid.Grid.Feeders;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Grid.Tests;

public sealed class FeederGeneratorTests
{
    [Theory]
    [InlineData(33)]
    [InlineData(330)]
    [InlineData(1650)]
    public void Generated_feeder_is_radial_sized_and_meets_its_rule(int n)
    {
        Feeder f = FeederGenerator.Generate(n, seed: 11);
        Assert.Equal(n, f.Buses.Count);
        Assert.Equal(n - 1, f.Lines.Count); // connected with n-1 lines: a tree (Feeder.Create rejects loops and islands)
        Assert.Equal(4000, f.Buses.Sum(b => b.LoadPkW), 6);
        PowerFlowResult r = new AcPowerFlow(f.Network).SolveBaseCase();
        Assert.True(r.Converged);
        // Impedances are scaled to put the base-case minimum voltage at 0.93 pu (rounding to 1e-6 ohm moves it a little).
        Assert.InRange(r.MinVoltagePu, 0.93 - 1e-3, 0.93 + 1e-3);
        // Ampacity is at least 1.25 times the base-case current, so the base case has no overcurrent.
        var v = r.FindViolations(f);
        Assert.DoesNotContain(v, x => x.Kind == ViolationKind.LineOverCurrent);
        Assert.All(f.Lines, l => Assert.Contains(l.AmpacityA, new double[] { 100, 150, 200, 300, 400, 600, 800 }));
        // Laterals branch: some bus has three or more lines.
        Assert.Contains(f.Buses, b => f.Lines.Count(l => l.From == b.Id || l.To == b.Id) >= 3);
    }

    [Fact]
    public void Same_seed_same_feeder_other_seed_other_feeder()
    {
        string a = FeederFile.ToJson(FeederGenerator.Generate(330, seed: 42));
        string b = FeederFile.ToJson(FeederGenerator.Generate(330, seed: 42));
        string c = FeederFile.ToJson(FeederGenerator.Generate(330, seed: 43));
        Assert.Equal(a, b);
        Assert.NotEqual(a, c);
    }

    [Fact]
    public void Options_change_the_target_voltage_and_load()
    {
        var o = new FeederGeneratorOptions(BaseKv: 24.9, TotalLoadKw: 6000, TargetMinVoltagePu: 0.95);
        Feeder f = FeederGenerator.Generate(200, seed: 1, o);
        Assert.All(f.Buses, b => Assert.Equal(24.9, b.BaseKv));
        Assert.Equal(6000, f.Buses.Sum(b => b.LoadPkW), 6);
        Assert.InRange(new AcPowerFlow(f.Network).SolveBaseCase().MinVoltagePu, 0.949, 0.951);
    }

    [Theory]
    [InlineData(1)]
    [InlineData(100_001)]
    public void Bus_count_out_of_range_is_rejected(int n) =>
        Assert.Throws<ArgumentOutOfRangeException>(() => FeederGenerator.Generate(n, seed: 1));
}
