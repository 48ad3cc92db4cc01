using BenchmarkDotNet.Attributes;
using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;

namespace FedGrid.Bench;

/// <summary>
/// Centralized training throughput on the default scenario (32 households, 18-bus feeder): one invocation trains a
/// fresh learner for seven simulated days — 672 decision steps, each the learner's decision for every household, the
/// safety projection (an exact AC check, a cone solve when a limit breaks), the environment step with its AC power
/// flow and the learning update — reported per decision step (decision steps per second = 1 / mean). Building the
/// trainer (networks, projector) happens in the iteration setup, outside the measurement.
/// </summary>
[MemoryDiagnoser]
public class TrainingBenchmarks
{
    private const int Days = 7;
    private Scenario _scenario = null!;
    private CentralizedTrainer _trainer = null!;

    /// <summary>The learner.</summary>
    [Params(LearnerKind.ActorCritic, LearnerKind.QLearning, LearnerKind.DoubleQ)]
    public LearnerKind Learner { get; set; }

    [GlobalSetup]
    public void Setup() => _scenario = DefaultScenario.Create(DefaultScenario.DefaultSeed, Days);

    [IterationSetup]
    public void Build() => _trainer = new CentralizedTrainer(_scenario, new TrainingOptions(Learner, 1));

    /// <summary>Seven days of centralized training, per decision step.</summary>
    [Benchmark(OperationsPerInvoke = Days * 96)]
    [InvocationCount(1)]
    public long CentralizedTrainingWeek() => _trainer.Train().DecisionSteps;
}
