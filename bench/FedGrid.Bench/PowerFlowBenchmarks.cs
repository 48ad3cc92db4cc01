using BenchmarkDotNet.Attributes;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Bench;

/// <summary>
/// Exact AC power flow (backward/forward sweep) at the feeder's file loads. Goal: the 1650-bus solve
/// under 2 ms median on the 2-core build machine, 0 B allocated per solve after set-up.
/// </summary>
[MemoryDiagnoser]
public class PowerFlowBenchmarks
{
    private AcPowerFlow _flow = null!;
    private PowerFlowResult _result = null!;
    private double[] _p = null!, _q = null!;

    /// <summary>Bus count: 33 is Baran &amp; Wu (1989), the others come from FeederGenerator (seed 1).</summary>
    [Params(33, 330, 1650)]
    public int Buses { get; set; }

    [GlobalSetup]
    public void Setup()
    {
        Feeder f = BenchFeeders.ForBusCount(Buses);
        _flow = new AcPowerFlow(f.Network);
        _result = new PowerFlowResult(f.Network.BusCount);
        _p = f.Network.LoadP;
        _q = f.Network.LoadQ;
    }

    [Benchmark]
    public bool Solve() => _flow.Solve(_p, _q, _result);
}
