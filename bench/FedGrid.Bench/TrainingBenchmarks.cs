using BenchmarkDotNet.Attributes;
using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;

namespace FedGrid.Bench;

/// <summary>
/// Centralized training throughput on the default scenario (32 households, 18-bus feeder): one simulated day per
/// invocation — 96 decision steps, each the learner's decision for every household, the safety projection (an exact
/// AC check, a cone solve when a limit breaks), the environment step with its AC power flow and the learning update —
/// reported per decision step (decision steps per second = 1 / mean). Building the trainer (networks, projector) is
/// included once per day.
/// </summary>
[MemoryDiagnoser]
public class TrainingBenchmarks
{
    private Scenario _scenario = null!;

    /// <summary>The learner.</summary>
    [Params(LearnerKind.ActorCritic, LearnerKind.QLearning, LearnerKind.DoubleQ)]
    public LearnerKind Learner { get; set; }

    [GlobalSetup]
    public void Setup() => _scenario = DefaultScenario.Create(DefaultScenario.DefaultSeed, 1);

    /// <summary>One day of centralized training, per decision step.</summary>
    [Benchmark(OperationsPerInvoke = 96)]
    public long CentralizedTrainingDay() => new CentralizedTrainer(_scenario, new TrainingOptions(Learner, 1)).Train().DecisionSteps;
}
