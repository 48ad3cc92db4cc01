using BenchmarkDotNet.Attributes;
using FedGrid.Federation.Households;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Federation.Wire;
using FedGrid.Households.Scenarios;

namespace FedGrid.Bench;

/// <summary>
/// The federated protocol's hot paths on the default scenario (32 households, 10 features each, actor and critic
/// [64, 64] tanh, the centralized trainer's settings). Goals: the household side of one decision step (partial sums of
/// both networks, sums reply → split forward → sampled proposal → projection inputs, final setpoint, own cost) allocates
/// 0 B; a simulated day of the whole in-process protocol (every household, coordinator, projection, environment, round-end
/// training and FedAvg, no transcript) fast enough for 150 days in 60 s (≤ 400 ms per day).
/// </summary>
[MemoryDiagnoser]
public class FederationBenchmarks
{
    private HouseholdAgent _agent = null!;
    private CoordinatorMessage _sums = null!, _setpoint = null!;
    private CoordinatorMessage _training = null!, _model = null!;
    private float[] _x = null!;
    private long _step;

    [GlobalSetup]
    public void SetupHousehold()
    {
        var run = new InProcessFederation(DefaultScenario.Create(DefaultScenario.DefaultSeed, 1),
            new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = new FederationOptions { Learning = TrainingDefaults.ActorCritic, StepsPerRound = 96 } });
        run.Start();
        _agent = run.Households[3];
        _sums = new CoordinatorMessage { HouseholdIndex = 3, Sums = new SumsReply { Kind = SumsKind.Others } };
        _sums.Sums.Actor.AddRange(Enumerable.Repeat(0.1f, 64));
        _sums.Sums.Critic.AddRange(Enumerable.Repeat(0.1f, 64));
        _setpoint = new CoordinatorMessage { HouseholdIndex = 3, Setpoint = new FinalSetpoint { SetpointKw = 0.5 } };
        _x = Enumerable.Range(0, 10).Select(i => 0.1f * i).ToArray();
        _training = new CoordinatorMessage { HouseholdIndex = 3, Training = new TrainingCall { Selected = false } };
        var model = new ModelBroadcast { Scope = ParameterScope.Shared };
        var (so, sn) = _agent.Actor.SharedRange();
        model.ActorParameters.AddRange(_agent.Actor.Parameters.Slice(so, sn).ToArray());
        var (co, cn) = _agent.Critic.SharedRange();
        model.CriticParameters.AddRange(_agent.Critic.Parameters.Slice(co, cn).ToArray());
        _model = new CoordinatorMessage { HouseholdIndex = -1, Model = model };
        for (int i = 0; i < 16; i++) HouseholdDecisionStep();
    }

    /// <summary>
    /// One household's whole decision step, messages in and out (the transport is left out); every 96th step also the
    /// round end of a household not called to train (training call, model broadcast).
    /// </summary>
    [Benchmark]
    public double HouseholdDecisionStep()
    {
        long s = _step++;
        if (s > 0 && s % 96 == 0)
        {
            _training.Training.Round = (int)(s / 96) - 1;
            _agent.Receive(_training);
            _model.Model.Round = (int)(s / 96);
            _agent.Receive(_model);
        }
        _agent.BeginStep(s, _x, 0, 1, 0.4);
        _sums.Sums.Round = (int)(s / 96);
        _sums.Sums.Step = s;
        _agent.Receive(_sums);
        _setpoint.Setpoint.Round = (int)(s / 96);
        _setpoint.Setpoint.Step = s;
        _agent.Receive(_setpoint);
        _agent.CompleteStep(0.1);
        return _agent.Proposal;
    }

}

/// <summary>
/// A simulated day of the whole in-process protocol (see <see cref="FederationBenchmarks"/>). The run moves on through
/// its horizon, so run it with one invocation per iteration:
/// <c>--filter '*FederatedRunBenchmarks*' --inProcess --strategy Monitoring --warmupCount 2 --iterationCount 6 --invocationCount 1 --unrollFactor 1</c>.
/// </summary>
[MemoryDiagnoser]
public class FederatedRunBenchmarks
{
    private InProcessFederation _run = null!;

    [GlobalSetup]
    public void SetupDay()
    {
        _run = new InProcessFederation(DefaultScenario.Create(DefaultScenario.DefaultSeed, 40),
            new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = new FederationOptions { Learning = TrainingDefaults.ActorCritic } });
        _run.Start();
    }

    /// <summary>One simulated day (96 decision steps and one round) of the whole in-process protocol, 32 households.</summary>
    [Benchmark(OperationsPerInvoke = 96)]
    public long FederatedDay()
    {
        for (int i = 0; i < 96; i++) _run.StepOnce();
        return _run.StepCount;
    }
}
