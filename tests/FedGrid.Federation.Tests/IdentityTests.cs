using FedGrid.Federation.Households;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Learning.ActorCritic;
using FedGrid.Learning.Networks;

namespace FedGrid.Federation.Tests;

/// <summary>The identities of DESIGN.md §7: the split first layer equals the unsplit one; one local full-batch step of FedAvg equals one centralized step.</summary>
public sealed class IdentityTests
{
    [Fact]
    public void SplitForwardThroughTheProtocolEqualsTheFullForward()
    {
        var sink = new RecordingTranscript();
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = TestRuns.Options() }, sink);
        run.Start();
        // The full model, assembled from what the coordinator sent each household (own columns + shared part).
        var actor = new DenseNetwork(run.Coordinator.ActorShape);
        foreach (TranscriptRecord r in sink.Records.Where(r => r.Kind() == RecordKind.Model))
        {
            int m = r.Sent.HouseholdIndex;
            var (co, cn) = actor.FirstLayerBlockRange(m);
            var (so, sn) = actor.SharedRange();
            float[] values = [.. r.Sent.Model.ActorParameters];
            values.AsSpan(0, cn).CopyTo(actor.Parameters.Slice(co, cn));
            values.AsSpan(cn, sn).CopyTo(actor.Parameters.Slice(so, sn));
        }
        int features = run.World.StateSizePerAgent, n = run.Households.Count;
        float[] state = new float[n * features];
        run.World.Observe(state); // slot 0, what every household reads for its first step
        Assert.True(run.StepOnce());

        var full = new float[actor.Shape.OutputSize];
        actor.Forward(state, actor.CreateWorkspace(), full);
        var split = new float[actor.Shape.OutputSize];
        var ws = actor.CreateWorkspace();
        double worst = 0;
        foreach (TranscriptRecord r in sink.Records.Where(r => r.Kind() == RecordKind.Sums && r.Step == 0))
        {
            int m = r.Sent.HouseholdIndex;
            Assert.Equal(SumsKind.Others, r.Sent.Sums.Kind);
            actor.ForwardSplit(m, state.AsSpan(m * features, features), [.. r.Sent.Sums.Actor], ws, split);
            double scale = full.Max(v => Math.Abs(v));
            for (int j = 0; j < full.Length; j++)
            {
                worst = Math.Max(worst, Math.Abs(split[j] - full[j]) / scale);
            }
        }
        Assert.True(worst <= 1e-6, $"split forward differs from the full forward by {worst:E2} (relative to the output's size)");
        // The partial sums each household sent are W_m x_m of the model it was given.
        var a = new float[actor.Shape.FirstLayerSize];
        foreach (TranscriptRecord r in sink.Records.Where(r => r.Kind() == RecordKind.PartialSums))
        {
            int m = r.Received.HouseholdIndex;
            actor.PartialSums(m, state.AsSpan(m * features, features), a);
            Assert.Equal(a, r.Received.PartialSums.Actor.ToArray());
        }
    }

    [Fact]
    public void LocalTrainingRefusesActorCriticOptionsItDoesNotImplement()
    {
        // The household's local update is the plain advantage actor-critic; the PPO-style options of the
        // centralized learner must be refused, not silently ignored, or the two trainers drift apart.
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = TestRuns.Options() }, new RecordingTranscript());
        run.Start();
        var learning = TestRuns.Options().Learning;
        LocalTrainer Make(ActorCriticOptions o) =>
            new(0, Copy(run.Coordinator.Actor), Copy(run.Coordinator.Critic), o, new LocalTrainingOptions());
        Assert.NotNull(Make(learning));
        Assert.Throws<NotSupportedException>(() => Make(learning with { UpdateEpochs = 2 }));
        Assert.Throws<NotSupportedException>(() => Make(learning with { ClipRatio = 0.2 }));
        Assert.Throws<NotSupportedException>(() => Make(learning with { GaeLambda = 0.95 }));
        Assert.Throws<NotSupportedException>(() => Make(learning with { NormaliseAdvantages = true }));
    }

    [Fact]
    public void OneFullBatchFedAvgRoundEqualsOneCentralizedStep()
    {
        const int steps = 12;
        var fed = TestRuns.Options(stepsPerRound: steps) with
        {
            Learning = TestRuns.Options().Learning with { MaxGradientNorm = 1e12, RolloutSteps = 4, ActorLearningRate = 0.05, CriticLearningRate = 0.05 },
            LocalTraining = new LocalTrainingOptions { FullBatch = true, Optimiser = LocalOptimiser.Sgd, Epochs = 1 },
        };
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = fed }, new RecordingTranscript());
        run.Start();
        DenseNetwork actor0 = Copy(run.Coordinator.Actor), critic0 = Copy(run.Coordinator.Critic);
        for (int i = 0; i < steps - 1; i++)
        {
            run.StepOnce();
        }
        int n = run.Households.Count, f = run.World.StateSizePerAgent;
        // Rows 0 … steps−2 of every household's own buffer (complete with costs), before the round's training.
        var x = new float[steps][];
        for (int t = 0; t < steps; t++)
        {
            x[t] = new float[n * f];
        }
        var pre = new float[n, steps];
        var lo = new float[n, steps];
        var hi = new float[n, steps];
        var cost = new float[n, steps];
        for (int m = 0; m < n; m++)
        {
            var b = run.Households[m].Buffer!;
            Assert.Equal(steps - 1, b.Count);
            for (int t = 0; t < steps - 1; t++)
            {
                b.StateRow(t).CopyTo(x[t].AsSpan(m * f, f));
                pre[m, t] = b.PreSquashRow(t)[0];
                lo[m, t] = b.LowerRow(t)[0];
                hi[m, t] = b.UpperRow(t)[0];
                cost[m, t] = b.Cost[t];
            }
        }
        run.StepOnce(); // last step of round 0: training, uploads, FedAvg, broadcast
        Assert.Equal(1, run.Coordinator.AggregatedRounds);
        for (int m = 0; m < n; m++)
        {
            // After the round the buffer keeps only the bootstrap row (the round's last step).
            run.Households[m].Buffer!.StateRow(0).CopyTo(x[steps - 1].AsSpan(m * f, f));
        }

        // The centralized reference: full forward and backward passes on the concatenated state, every household's own
        // loss with weight n_m / N (equal here), one SGD step from the same parameters.
        ActorCriticOptions o = fed.Learning;
        int rows = steps - 1;
        float weight = 1f / rows, gamma = (float)o.Gamma;
        var actorGrad = new float[actor0.ParameterCount];
        var criticGrad = new float[critic0.ParameterCount];
        var ownActorGrad = new float[n][];
        var aws = actor0.CreateWorkspace();
        var cws = critic0.CreateWorkspace();
        var values = new float[n];
        var outA = new float[actor0.Shape.OutputSize];
        for (int m = 0; m < n; m++)
        {
            var gA = new float[actor0.ParameterCount];
            var gC = new float[critic0.ParameterCount];
            critic0.Forward(x[rows], cws, values);
            float ret = values[m];
            for (int t = rows - 1; t >= 0; t--)
            {
                ret = (float)(cost[m, t] * o.CostScale) + gamma * ret;
                critic0.Forward(x[t], cws, values);
                float adv = ret - values[m];
                var dv = new float[n];
                dv[m] = weight * (values[m] - ret);
                critic0.Backward(cws, dv, gC);
                actor0.Forward(x[t], aws, outA);
                var da = new float[outA.Length];
                ActorCriticLoss.Actor(outA.AsSpan(2 * m, 2), [pre[m, t]], [adv], [lo[m, t]], [hi[m, t]], 1, o.EntropyCoefficient,
                    o.LogStdMin, o.LogStdMax, weight, da.AsSpan(2 * m, 2));
                actor0.Backward(aws, da, gA);
            }
            for (int i = 0; i < gA.Length; i++)
            {
                actorGrad[i] += gA[i] / n;
            }
            for (int i = 0; i < gC.Length; i++)
            {
                criticGrad[i] += gC[i] / n;
            }
            ownActorGrad[m] = gA;
        }
        // Parameters one household alone trains (its first-layer columns and its output head) take its own loss's full
        // step; every other parameter the mean step. Everything else in the check is the independent reference above.
        var ownCriticGrad = new float[n][];
        for (int m = 0; m < n; m++)
        {
            ownCriticGrad[m] = new float[critic0.ParameterCount];
        }
        // (critic own gradients: recompute per household, as for the actor)
        for (int m = 0; m < n; m++)
        {
            critic0.Forward(x[rows], cws, values);
            float ret = values[m];
            for (int t = rows - 1; t >= 0; t--)
            {
                ret = (float)(cost[m, t] * o.CostScale) + gamma * ret;
                critic0.Forward(x[t], cws, values);
                var dv = new float[n];
                dv[m] = weight * (values[m] - ret);
                critic0.Backward(cws, dv, ownCriticGrad[m]);
            }
        }
        Check(actor0, run.Coordinator.Actor, actorGrad, ownActorGrad, o.ActorLearningRate, 2, "actor");
        Check(critic0, run.Coordinator.Critic, criticGrad, ownCriticGrad, o.CriticLearningRate, 1, "critic");
    }

    private static void Check(DenseNetwork before, DenseNetwork federated, float[] meanGrad, float[][] ownGrad, double lr, int outputsPerHousehold, string what)
    {
        int n = ownGrad.Length;
        var owner = Enumerable.Repeat(-1, before.ParameterCount).ToArray();
        for (int m = 0; m < n; m++)
        {
            foreach (var (o, len) in Coordination.Coordinator.OwnedRanges(before, m, outputsPerHousehold))
            {
                for (int i = o; i < o + len; i++) owner[i] = m;
            }
        }
        double worstShared = 0, sharedStep = 0, worstOwned = 0, ownedStep = 0;
        for (int i = 0; i < before.ParameterCount; i++)
        {
            double g = owner[i] < 0 ? meanGrad[i] : ownGrad[owner[i]][i];
            double expected = before.Parameters[i] - lr * g;
            double diff = Math.Abs(federated.Parameters[i] - expected);
            if (owner[i] < 0)
            {
                sharedStep = Math.Max(sharedStep, Math.Abs(lr * g));
                worstShared = Math.Max(worstShared, diff);
            }
            else
            {
                ownedStep = Math.Max(ownedStep, Math.Abs(lr * g));
                worstOwned = Math.Max(worstOwned, diff);
            }
        }
        Assert.True(sharedStep > 1e-5 && ownedStep > 1e-5, $"{what}: the centralized step moved nothing; the check would be empty");
        Assert.True(worstShared <= 1e-3 * sharedStep + 1e-7, $"{what}: shared parameters differ by {worstShared:E2} (step size {sharedStep:E2})");
        Assert.True(worstOwned <= 1e-3 * ownedStep + 1e-7, $"{what}: household-owned parameters differ by {worstOwned:E2} (step size {ownedStep:E2})");
    }

    private static DenseNetwork Copy(DenseNetwork network)
    {
        var copy = new DenseNetwork(network.Shape);
        copy.LoadParameters(network.Parameters);
        return copy;
    }
}
