using BenchmarkDotNet.Attributes;
using FedGrid.Federation.Training;
using FedGrid.Learning.ActorCritic;
using FedGrid.Learning.Randomness;

namespace FedGrid.Bench;

/// <summary>
/// The learner's hot paths with the training defaults (<see cref="TrainingDefaults.ActorCritic"/>: actor and critic
/// [64, 64] tanh, one-step updates) and 32 households of <see cref="HouseholdControlTask.FeaturesPerHousehold"/> state
/// features and one setpoint each. Goals: one household decision step (partial sums + split forward + sampling)
/// at most 20 µs and 0 B allocated; training throughput in centralised decision steps per second.
/// </summary>
[MemoryDiagnoser]
public class LearningBenchmarks
{
    private const int Households = 32, StateSize = HouseholdControlTask.FeaturesPerHousehold;
    private ActorCriticLearner _learner = null!;
    private float[] _own = null!, _others = null!, _partial = null!, _lower = null!, _upper = null!, _action = null!;
    private float[] _state = null!, _next = null!, _lowerAll = null!, _upperAll = null!, _actions = null!, _costs = null!;

    [GlobalSetup]
    public void Setup()
    {
        _learner = new ActorCriticLearner(Households, StateSize, 1, TrainingDefaults.ActorCritic);
        var rng = new LearningRandom(1);
        _own = Fill(rng, StateSize);
        _others = Fill(rng, 64);
        _partial = new float[64];
        _lower = [0.5f];
        _upper = [3.0f];
        _action = new float[1];
        _state = Fill(rng, Households * StateSize);
        _next = Fill(rng, Households * StateSize);
        _lowerAll = new float[Households];
        _upperAll = Enumerable.Repeat(2f, Households).ToArray();
        _actions = new float[Households];
        _costs = Fill(rng, Households);
    }

    /// <summary>One household's decision: its partial sums a_m (to send), then the split forward with Σ_{k≠m} a_k and a sampled setpoint.</summary>
    [Benchmark]
    public float HouseholdDecisionStep()
    {
        _learner.ActorPartialSums(7, _own, _partial);
        _learner.DecideForAgent(7, _own, _others, _lower, _upper, _action, explore: true);
        return _action[0];
    }

    /// <summary>
    /// Centralised training, 32 households: one decision step for all households (full forward, sampling) plus its
    /// update (one-step TD, the default: an update every step); each invocation runs 8 steps. Reported per decision step.
    /// </summary>
    [Benchmark(OperationsPerInvoke = 8)]
    public long CentralisedTrainingStep()
    {
        for (int t = 0; t < 8; t++)
        {
            _learner.Act(_state, _lowerAll, _upperAll, _actions, explore: true);
            _learner.Record(_costs, _next, done: false);
        }
        return _learner.UpdateCount;
    }

    private static float[] Fill(LearningRandom rng, int n)
    {
        float[] v = new float[n];
        for (int i = 0; i < n; i++)
        {
            v[i] = rng.NextSingle(-1f, 1f);
        }
        return v;
    }
}
