using BenchmarkDotNet.Attributes;
using FedGrid.Households.Optimum;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Bench.Households;

/// <summary>
/// The perfect-foresight optimum of Monday of the default scenario (32 households, 18-bus feeder, 96 slots:
/// about 12 900 variables, 29 000 constraint rows): building the program and solving it with the interior-point
/// solver. Goal: seconds, not minutes, on the 2-core build machine. <c>Week</c> solves the 7-day horizon as one
/// program (about 94 000 variables) to show how the time grows with the horizon.
/// Measured (ShortRun, shared 2-core machine, 2026-12-01): Day 1.56 s (65 MB allocated), Week 20.1 s (514 MB), ratio 13
/// for 7 times the slots.
/// </summary>
[MemoryDiagnoser]
[MedianColumn]
public class OptimumBenchmarks
{
    private PerfectForesightOptimum _day = null!, _week = null!;
    private DemandResponseEnvironment _dayEnv = null!, _weekEnv = null!;

    [GlobalSetup]
    public void Setup()
    {
        var day = DefaultScenario.Create(days: 1);
        _day = new PerfectForesightOptimum(day);
        _dayEnv = new DemandResponseEnvironment(day);
        var week = DefaultScenario.Create(days: 7);
        _week = new PerfectForesightOptimum(week);
        _weekEnv = new DemandResponseEnvironment(week);
    }

    /// <summary>One day (96 slots).</summary>
    [Benchmark(Baseline = true)]
    public double Day() => _day.SolveWindow(_dayEnv).CostDollars;

    /// <summary>Seven days in one program (672 slots).</summary>
    [Benchmark]
    public double Week() => _week.SolveWindow(_weekEnv, _weekEnv.SlotCount).CostDollars;
}
