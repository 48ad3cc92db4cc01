using FedGrid.Learning.ActorCritic;
using FedGrid.Learning.Randomness;
using FedGrid.Learning.Tabular;
using FedGrid.Learning.Tasks;

namespace FedGrid.Learning.Tests;

public sealed class ActorCriticTests(Xunit.Abstractions.ITestOutputHelper log)
{
    private static readonly ActorCriticOptions Options = new()
    {
        HiddenSizes = [32],
        Gamma = 0.5,
        ActorLearningRate = 1e-3,
        CriticLearningRate = 3e-3,
        EntropyCoefficient = 1e-3,
        RolloutSteps = 4,
        MaxGradientNorm = 1.0,
        Seed = 7,
    };

    private static double Evaluate(ActorCriticLearner learner, IControlTask task) =>
        Enumerable.Range(0, 20).Sum(e => learner.RunEpisode(task, 10_000 + (ulong)e, train: false).MeanCostPerStep) / 20;

    [Fact]
    public void LearnsToTrackABoundedTarget()
    {
        var task = new TrackingTask(agents: 3);
        var learner = new ActorCriticLearner(3, 2, 1, Options);
        double before = Evaluate(learner, task);
        learner.Train(task, episodes: 400, seed: 1);
        double after = Evaluate(learner, task);
        log.WriteLine($"tracking: cost per step {before:F4} untrained, {after:F4} after 400 episodes");
        // The untrained policy sits near the middle of each box: mean cost ≈ var(target) × 3 agents ≈ 3·(1.6²/12) ≈ 0.64.
        Assert.InRange(before, 0.3, 1.5);
        Assert.True(after < 0.05 * before, $"cost per step {before:F4} before training, {after:F4} after");
        Assert.True(learner.UpdateCount >= 400 * 4);
    }

    [Fact]
    public void ShiftsDeferrableEnergyToCheapSlots()
    {
        // Carry-over and a moving box: savings captured = (no control − learned) / (no control − optimum), the
        // optimum computed in the task from the known prices (the cheapest slots).
        var task = new DeferrableTask(agents: 4);
        var learner = new ActorCriticLearner(4, 3, 1, Options with { HiddenSizes = [32, 32], Gamma = 0.95, RolloutSteps = 8 });
        ulong[] seeds = Enumerable.Range(0, 20).Select(i => 50_000 + (ulong)i).ToArray();
        double none = seeds.Average(task.NoControlCost), best = seeds.Average(task.OptimalCost);
        learner.Train(task, episodes: 1500, seed: 1);
        double learned = seeds.Average(s => learner.RunEpisode(task, s, train: false).TotalCost);
        double captured = (none - learned) / (none - best);
        log.WriteLine($"no control {none:F3}, learned {learned:F3}, optimum {best:F3}: {100 * captured:F1} % of the savings captured");
        Assert.True(best < none);
        Assert.True(captured > 0.9, $"no control {none:F3}, learned {learned:F3}, optimum {best:F3}: {100 * captured:F1} % captured");
    }

    [Fact]
    public void TrainingIsDeterministicForASeed()
    {
        var task = new TrackingTask(agents: 2, steps: 8);
        var a = new ActorCriticLearner(2, 2, 1, Options);
        var b = new ActorCriticLearner(2, 2, 1, Options);
        IReadOnlyList<EpisodeResult> ra = a.Train(task, 20, seed: 3);
        IReadOnlyList<EpisodeResult> rb = b.Train(task, 20, seed: 3);
        Assert.Equal(ra, rb);
        Assert.Equal(a.Actor.Parameters.ToArray(), b.Actor.Parameters.ToArray());
        Assert.Equal(a.Critic.Parameters.ToArray(), b.Critic.Parameters.ToArray());
        var c = new ActorCriticLearner(2, 2, 1, Options with { Seed = 8 });
        c.Train(task, 20, seed: 3);
        Assert.NotEqual(a.Actor.Parameters.ToArray(), c.Actor.Parameters.ToArray());
    }

    [Fact]
    public void OneHouseholdDecisionEqualsItsHeadOfTheFullPolicy()
    {
        var learner = new ActorCriticLearner(4, 3, 2, Options with { HiddenSizes = [16, 8] });
        var rng = new LearningRandom(5);
        float[] state = TestData.Vector(rng, 12, 1f);
        float[] lo = Enumerable.Repeat(0f, 8).ToArray(), hi = Enumerable.Repeat(3f, 8).ToArray(), full = new float[8];
        learner.Act(state, lo, hi, full, explore: false);

        int h1 = 16;
        float[][] partial = new float[4][];
        for (int m = 0; m < 4; m++)
        {
            partial[m] = new float[h1];
            learner.ActorPartialSums(m, state.AsSpan(3 * m, 3), partial[m]);
        }
        float[] others = new float[h1], own = new float[2];
        for (int m = 0; m < 4; m++)
        {
            Array.Clear(others);
            for (int k = 0; k < 4; k++)
            {
                if (k != m)
                {
                    for (int o = 0; o < h1; o++)
                    {
                        others[o] += partial[k][o];
                    }
                }
            }
            learner.DecideForAgent(m, state.AsSpan(3 * m, 3), others, lo.AsSpan(0, 2), hi.AsSpan(0, 2), own, explore: false);
            Assert.Equal(full[2 * m], own[0], 1e-5f);
            Assert.Equal(full[2 * m + 1], own[1], 1e-5f);
        }
    }

    [Fact]
    public void DecisionStepAllocatesNothingAfterWarmUp()
    {
        // Allocation count, not timing (timing lives in bench/): GC.GetAllocatedBytesForCurrentThread is exact per thread.
        var learner = new ActorCriticLearner(32, 6, 1, new ActorCriticOptions());
        float[] own = new float[6], others = new float[64], lo = [0f], hi = [2f], action = new float[1], partial = new float[64];
        learner.ActorPartialSums(3, own, partial);
        learner.DecideForAgent(3, own, others, lo, hi, action, explore: true);
        long before = GC.GetAllocatedBytesForCurrentThread();
        for (int i = 0; i < 1000; i++)
        {
            own[i % 6] = i * 0.001f;
            learner.ActorPartialSums(3, own, partial);
            learner.DecideForAgent(3, own, others, lo, hi, action, explore: true);
        }
        Assert.Equal(0, GC.GetAllocatedBytesForCurrentThread() - before);
        Assert.InRange(action[0], 0f, 2f);
    }

    [Fact]
    public void ClippedMultiEpochUpdatesWithGaeLearnToTrack()
    {
        var task = new TrackingTask(agents: 3);
        var learner = new ActorCriticLearner(3, 2, 1, Options with
        {
            RolloutSteps = 8, GaeLambda = 0.95, UpdateEpochs = 4, ClipRatio = 0.2, NormaliseAdvantages = true,
        });
        double before = Evaluate(learner, task);
        learner.Train(task, episodes: 400, seed: 1);
        double after = Evaluate(learner, task);
        log.WriteLine($"tracking (clipped, 4 epochs, GAE 0.95): cost per step {before:F4} untrained, {after:F4} after 400 episodes");
        Assert.True(after < 0.05 * before, $"cost per step {before:F4} before training, {after:F4} after");
    }

    [Fact]
    public void OneStepGaeIsTheTdErrorAndOnePassOfTheClippedObjectiveIsThePlainGradient()
    {
        // GAE(λ) over a one-step rollout is the TD error whatever λ (Schulman et al. 2016, eq. 11-16); on its first pass
        // the clipped surrogate has ratio 1, so its gradient is the plain policy gradient (Schulman et al. 2017, §3).
        var task = new TrackingTask(agents: 2);
        ActorCriticLearner Trained(ActorCriticOptions o)
        {
            var l = new ActorCriticLearner(2, 2, 1, o);
            l.Train(task, episodes: 5, seed: 3);
            return l;
        }
        ActorCriticLearner plain = Trained(Options with { RolloutSteps = 1 });
        ActorCriticLearner td = Trained(Options with { RolloutSteps = 1, GaeLambda = 0 });
        ActorCriticLearner clipped = Trained(Options with { RolloutSteps = 1, ClipRatio = 0.2 });
        ActorCriticLearner twoPass = Trained(Options with { RolloutSteps = 1, ClipRatio = 0.2, UpdateEpochs = 2 });
        for (int i = 0; i < plain.Actor.ParameterCount; i++)
        {
            Assert.Equal(plain.Actor.Parameters[i], td.Actor.Parameters[i], 1e-4f);
            Assert.Equal(plain.Actor.Parameters[i], clipped.Actor.Parameters[i], 1e-4f);
        }
        double differs = 0;
        for (int i = 0; i < plain.Actor.ParameterCount; i++) differs = Math.Max(differs, Math.Abs(plain.Actor.Parameters[i] - twoPass.Actor.Parameters[i]));
        Assert.True(differs > 1e-4, "a second pass must move the parameters further");
    }

    [Fact]
    public void PpoSettingsOutsideTheirRangesAreRejected()
    {
        Assert.Throws<ArgumentOutOfRangeException>(() => new ActorCriticLearner(2, 2, 1, Options with { GaeLambda = 1.5 }));
        Assert.Throws<ArgumentOutOfRangeException>(() => new ActorCriticLearner(2, 2, 1, Options with { UpdateEpochs = 0 }));
        Assert.Throws<ArgumentOutOfRangeException>(() => new ActorCriticLearner(2, 2, 1, Options with { ClipRatio = 1 }));
    }

    [Fact]
    public void RecordWithoutActAndMismatchedTasksAreRejected()
    {
        var learner = new ActorCriticLearner(2, 2, 1, Options);
        Assert.Throws<InvalidOperationException>(() => learner.Record([0f, 0f], new float[4], done: true));
        Assert.Throws<ArgumentException>(() => learner.RunEpisode(new TrackingTask(3), 1, train: true));
        Assert.Throws<ArgumentOutOfRangeException>(() => new ActorCriticLearner(2, 2, 1, Options with { Gamma = 1.5 }));
    }

    [Fact]
    public void ValuesAreTheCriticsPerHouseholdHeadsAndDiscardDropsAPartRollout()
    {
        var learner = new ActorCriticLearner(3, 2, 1, Options);
        float[] state = TestData.Vector(new LearningRandom(2), 6, 1f), v = new float[3], direct = new float[3];
        learner.Values(state, v);
        learner.Critic.Forward(state, learner.Critic.CreateWorkspace(), direct);
        Assert.Equal(direct, v);

        float[] lo = new float[3], hi = [1f, 1f, 1f], a = new float[3], costs = [1f, 2f, 3f];
        learner.Act(state, lo, hi, a, explore: true);
        Assert.False(learner.Record(costs, state, done: false)); // 1 of 4 rollout steps
        learner.DiscardRollout();
        for (int i = 0; i < 3; i++)
        {
            learner.Act(state, lo, hi, a, explore: true);
            Assert.False(learner.Record(costs, state, done: false));
        }
        learner.Act(state, lo, hi, a, explore: true);
        Assert.True(learner.Record(costs, state, done: false)); // the discarded step did not count
        Assert.Equal(1, learner.UpdateCount);
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void ResettingTheOptimisersMakesTheNextUpdateThatOfAFreshLearner(bool reset)
    {
        var task = new TrackingTask(agents: 2, steps: 8);
        var trained = new ActorCriticLearner(2, 2, 1, Options with { RolloutSteps = 8 });
        trained.Train(task, 30, seed: 5);
        if (reset)
        {
            trained.ResetOptimisers();
        }
        var fresh = new ActorCriticLearner(2, 2, 1, Options with { RolloutSteps = 8 });
        fresh.Actor.LoadParameters(trained.Actor.Parameters);
        fresh.Critic.LoadParameters(trained.Critic.Parameters);
        foreach (ActorCriticLearner l in new[] { trained, fresh })
        {
            // One rollout acting on the mean (no random draws), so both learners see identical data.
            var rng = new LearningRandom(9);
            float[] lo = [-1f, -0.5f], hi = [1f, 1.5f], a = new float[2];
            for (int t = 0; t < 8; t++)
            {
                float[] s = TestData.Vector(rng, 4, 1f), costs = TestData.Vector(rng, 2, 1f), next = TestData.Vector(rng, 4, 1f);
                l.Act(s, lo, hi, a, explore: false);
                l.Record(costs, next, done: false);
            }
        }
        bool same = trained.Actor.Parameters.SequenceEqual(fresh.Actor.Parameters) && trained.Critic.Parameters.SequenceEqual(fresh.Critic.Parameters);
        Assert.Equal(reset, same);
    }

    [Fact]
    public void WarmStartClonesTheDemonstratorAndEvaluatesItsCost()
    {
        // A demonstrator on 2 agents, boxes [−1, 1] and [0, 2]: agent 0 at its upper bound when its first feature is
        // positive, else at its lower bound; agent 1 always at 1.5 (u* = atanh(0.5)). Every cost is 1, so with γ = 0.5 and
        // the sequence bootstrapped by the critic itself every return is the geometric series 1/(1 − γ) = 2.
        const int rows = 64;
        var rng = new LearningRandom(11);
        float[] states = TestData.Vector(rng, rows * 4, 1f), lower = new float[rows * 2], upper = new float[rows * 2], actions = new float[rows * 2];
        float[] costs = Enumerable.Repeat(1f, rows * 2).ToArray();
        for (int i = 0; i < rows; i++)
        {
            (lower[2 * i], upper[2 * i], lower[2 * i + 1], upper[2 * i + 1]) = (-1f, 1f, 0f, 2f);
            actions[2 * i] = states[4 * i] > 0 ? 1f : -1f;
            actions[2 * i + 1] = 1.5f;
        }
        var learner = new ActorCriticLearner(2, 2, 1, Options with { HiddenSizes = [32, 32] });
        var (actorLoss, criticLoss) = learner.WarmStart(states, lower, upper, actions, costs, states.AsSpan(0, 4), epochs: 400, batchSize: 16,
            edge: 2.5f, learningRate: 3e-3);
        log.WriteLine($"warm start: actor mse {actorLoss:E2} (pre-squash), critic mse {criticLoss:E2}");
        float[] a = new float[2], v = new float[2];
        int agree = 0;
        for (int i = 0; i < rows; i++)
        {
            ReadOnlySpan<float> s = states.AsSpan(4 * i, 4);
            learner.Act(s, lower.AsSpan(2 * i, 2), upper.AsSpan(2 * i, 2), a, explore: false);
            if (Math.Abs(a[0] - actions[2 * i]) < 0.1f) agree++;
            Assert.Equal(1.5f, a[1], 0.05f);
            learner.Values(s, v);
            Assert.Equal(2f, v[0], 0.1f);
            Assert.Equal(2f, v[1], 0.1f);
        }
        Assert.True(agree >= rows - 2, $"{agree} of {rows} bang-bang actions within 0.1 of the demonstrator's");
        // The warm start made no reinforcement update and left the step sizes as configured: the next update equals a
        // fresh learner's from the same parameters (both optimisers were reset).
        Assert.Equal(0, learner.UpdateCount);
        var fresh = new ActorCriticLearner(2, 2, 1, Options with { HiddenSizes = [32, 32] });
        fresh.Actor.LoadParameters(learner.Actor.Parameters);
        fresh.Critic.LoadParameters(learner.Critic.Parameters);
        foreach (ActorCriticLearner l in new[] { learner, fresh })
        {
            for (int t = 0; t < Options.RolloutSteps; t++)
            {
                l.Act(states.AsSpan(4 * t, 4), lower.AsSpan(0, 2), upper.AsSpan(0, 2), a, explore: false);
                l.Record(costs.AsSpan(0, 2), states.AsSpan(4 * t + 4, 4), done: false);
            }
        }
        Assert.True(learner.Actor.Parameters.SequenceEqual(fresh.Actor.Parameters));
        Assert.True(learner.Critic.Parameters.SequenceEqual(fresh.Critic.Parameters));
        Assert.Throws<ArgumentException>(() => learner.WarmStart(states, lower, upper, actions, costs.AsSpan(1), [], 1, 16, 2.5f, 1e-3));
        Assert.Throws<ArgumentOutOfRangeException>(() => learner.WarmStart(states, lower, upper, actions, costs, [], 1, 16, 0f, 1e-3));
    }

    [Fact]
    public void OneStepTdUpdatesEveryStep()
    {
        var task = new TrackingTask(agents: 1, steps: 10);
        var learner = new ActorCriticLearner(1, 2, 1, Options with { RolloutSteps = 1 });
        EpisodeResult r = learner.RunEpisode(task, 1, train: true);
        Assert.Equal(10, r.Steps);
        Assert.Equal(10, r.Updates);
        Assert.True(learner.LastActorGradientNorm > 0);
        Assert.True(learner.LastCriticGradientNorm > 0);
    }

    [Theory]
    [InlineData(false)]
    [InlineData(true)]
    public void TabularControllerLearnsTheTrackingTask(bool doubleQ)
    {
        var task = new TrackingTask(agents: 2, steps: 16);
        var disc = new UniformDiscretiser([-1f, 0f], [1.5f, 2f], [10, 1]);
        var controller = new TabularController(2, 2, disc, new BoxActionGrid(11), new TabularOptions
        {
            Gamma = 0.0,
            Epsilon = new LinearSchedule(1.0, 0.0, 3000),
            LearningRate = new PolynomialSchedule(1.0, 0.7),
            Seed = 2,
        }, doubleQ);
        double before = controller.RunEpisode(task, 99, train: false).MeanCostPerStep;
        int calls = 0;
        IReadOnlyList<EpisodeResult> results = controller.Train(task, 400, seed: 4, (_, _) => calls++);
        Assert.Equal(400, calls);
        Assert.Equal(400 * 16, results.Sum(r => r.Steps));
        double after = Enumerable.Range(0, 10).Average(e => controller.RunEpisode(task, 500 + (ulong)e, train: false).MeanCostPerStep);
        log.WriteLine($"tabular (double Q: {doubleQ}) tracking: {before:F4} -> {after:F4}");
        Assert.True(after < 0.25 * before, $"{before:F4} -> {after:F4}");
        Assert.True(controller.Learner(0).StepCount > 0);
    }
}
