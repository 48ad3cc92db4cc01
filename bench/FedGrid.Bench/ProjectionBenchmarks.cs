using BenchmarkDotNet.Attributes;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.Optimization;
using FedGrid.Grid.Projection;
using FedGrid.TestSupport;

namespace FedGrid.Bench;

/// <summary>
/// The safety projection on the Baran &amp; Wu feeder (33 buses) and 50 copies of it joined at the
/// substation (1650 buses), proposals at the top of their boxes (seeded). Goals on the 2-core build
/// machine: median cone solve ≤ 2 ms at 33 buses and ≤ 150 ms at 1650 buses. <c>Project</c> is the
/// whole projection (exact AC check of the proposal, cone solve, exact AC check of the result);
/// slots alternate between two proposals so that warm starts start from a different slot's solution.
/// </summary>
[MemoryDiagnoser]
[MedianColumn]
public class ProjectionBenchmarks
{
    private SetpointProjector _projector = null!;
    private ProjectionInput _a = null!, _b = null!;
    private ProjectionResult _result = null!;
    private int _slot;

    /// <summary>Bus count: 33 (one copy) or 1650 (50 copies).</summary>
    [Params(33, 1650)]
    public int Buses { get; set; }

    /// <summary>Interior-point warm start from the previous slot's solution.</summary>
    [Params(false, true)]
    public bool WarmStart { get; set; }

    [GlobalSetup]
    public void Setup()
    {
        Feeder feeder = TestFeeders.BaranWu(Buses / 33);
        var set = SyntheticUnitSet.Draw(feeder, 1);
        _a = set.Input;
        _b = new ProjectionInput(feeder.Buses.Count, set.Units.Count);
        _a.BaseLoadKw.CopyTo(_b.BaseLoadKw, 0);
        _a.BaseLoadKvar.CopyTo(_b.BaseLoadKvar, 0);
        _a.MinKw.CopyTo(_b.MinKw, 0);
        _a.MaxKw.CopyTo(_b.MaxKw, 0);
        for (int u = 0; u < set.Units.Count; u++)
            _b.ProposalKw[u] = _a.MinKw[u] + (0.8 + 0.2 * ((u * 7919) % 97) / 96.0) * (_a.MaxKw[u] - _a.MinKw[u]);
        _projector = new SetpointProjector(feeder, set.Units, options: new ProjectionOptions(Solver: new SolverOptions(WarmStart: WarmStart)));
        _result = _projector.CreateResult();
        _projector.Project(_a, _result);
        _projector.Project(_b, _result);
    }

    /// <summary>The whole projection of one slot.</summary>
    [Benchmark]
    public ProjectionStatus Project()
    {
        _projector.Project((_slot++ & 1) == 0 ? _a : _b, _result);
        return _result.Status;
    }
}
