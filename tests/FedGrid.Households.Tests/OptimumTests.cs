using FedGrid.Households.Optimum;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;
using Xunit.Abstractions;

namespace FedGrid.Households.Tests;

public class OptimumTests(ITestOutputHelper output)
{
    [Fact]
    public void Probe()
    {
        var scenario = DefaultScenario.Create(days: 2);
        var env = new DemandResponseEnvironment(scenario);
        var opt = new PerfectForesightOptimum(scenario);
        foreach (var d in opt.Run(env))
        {
            var o = d.Optimum;
            output.WriteLine($"day {o.Day} {o.Status} cost {o.CostDollars:F4} bill {o.BillDollars:F4} disc {o.DiscomfortDollars:F4} exact {o.ExactDiscomfortDollars:F4} peak {o.PeakKw:F2} viol {o.ViolationSlots} gap {o.MaxRelaxationGapPu:E2} solve {o.SolveMs:F0} build {o.BuildMs:F0} it {o.Iterations} n {o.Variables} m {o.Constraints}");
            output.WriteLine($"  replay bill {d.Replay.BillDollars:F4} disc {d.Replay.DiscomfortDollars:F4} peak {d.Replay.PeakKw:F2} viol {d.Replay.ViolationSlots} clamp {d.Replay.MaxClampKw:E2}");
        }
        var (nc, _) = PolicyRun.Run(env, new NoControlPolicy());
        output.WriteLine($"noControl {nc}");
    }
}
