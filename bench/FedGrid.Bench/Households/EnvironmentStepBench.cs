using BenchmarkDotNet.Attributes;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Bench.Households;

/// <summary>
/// One decision step of the demand-response environment on the default scenario (32 households,
/// 18-bus feeder, exact AC power flow included), with the price-rule policy choosing the setpoints.
/// Goal: no allocation per step.
/// </summary>
[MemoryDiagnoser]
public class EnvironmentStepBench
{
    private DemandResponseEnvironment _env = null!;
    private StepResult _result = null!;
    private double[] _setpoints = null!;
    private PriceThresholdPolicy _rule = null!;

    /// <summary>Builds a 28-day default scenario once.</summary>
    [GlobalSetup]
    public void Setup()
    {
        _env = new DemandResponseEnvironment(DefaultScenario.Create(DefaultScenario.DefaultSeed, 28));
        _result = _env.CreateResult();
        _setpoints = new double[_env.HouseholdCount];
        _rule = new PriceThresholdPolicy(DefaultScenario.PeakPrice, 12);
    }

    /// <summary>Policy decision plus environment step (restarts the horizon when it ends).</summary>
    [Benchmark]
    public double DecideAndStep()
    {
        if (_env.Done) _env.Reset();
        _rule.Decide(_env, _setpoints);
        _env.Step(_setpoints, _result);
        return _result.SubstationImportKw;
    }
}
