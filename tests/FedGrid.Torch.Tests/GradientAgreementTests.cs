using FedGrid.Learning.ActorCritic;
using FedGrid.Learning.Networks;
using FedGrid.Learning.Randomness;
using FedGrid.Torch.Reference;
using TorchSharp;
using Xunit.Abstractions;
using static TorchSharp.torch;

namespace FedGrid.Torch.Tests;

/// <summary>
/// Outside check: the hand-written backward passes of FedGrid.Learning against TorchSharp autograd (float64) on random
/// networks and inputs, with the same weights copied from our flat vector. Requirement: within 1e-5 relative.
/// </summary>
public sealed class GradientAgreementTests(ITestOutputHelper log)
{
    private const double Tolerance = 1e-5;

    public static TheoryData<int[], int[], int, Activation, ulong> Shapes => new()
    {
        { new[] { 3, 4, 2 }, new[] { 8, 6 }, 5, Activation.Tanh, 11UL },
        { new[] { 6, 6, 6, 6 }, new[] { 16 }, 8, Activation.Relu, 12UL },
        { new[] { 5 }, new[] { 7, 9, 4 }, 3, Activation.Tanh, 13UL },
        { new[] { 2, 9, 1, 4, 3 }, new[] { 12, 10 }, 10, Activation.Relu, 14UL },
    };

    [Theory]
    [MemberData(nameof(Shapes))]
    public void FullBackwardMatchesAutograd(int[] blocks, int[] hidden, int outputs, Activation activation, ulong seed)
    {
        using var scope = NewDisposeScope();
        var rng = new LearningRandom(seed);
        var net = new DenseNetwork(new NetworkShape(blocks, hidden, outputs, activation));
        net.Initialise(seed);
        RandomiseBiases(net, rng);
        float[] x = RandomVector(rng, net.Shape.InputSize, 1.5f);
        float[] c = RandomVector(rng, outputs, 1f); // loss = Σ c_i y_i

        var ws = net.CreateWorkspace();
        float[] y = new float[outputs], grad = new float[net.ParameterCount], gx = new float[x.Length];
        net.Forward(x, ws, y);
        net.Backward(ws, c, grad, gx);

        using var twin = new TorchReferenceNetwork(net);
        Tensor tx = twin.Tensor(x, 1, x.Length, requiresGrad: true);
        Tensor ty = twin.Forward(tx);
        (ty * twin.Tensor(c, 1, outputs)).sum().backward();

        double outRel = Agreement.MaxRelative(y, TorchReferenceNetwork.Values(ty));
        double gradRel = Agreement.MaxRelative(grad, twin.FlatGradient());
        double gradElem = Agreement.MaxElementwise(grad, twin.FlatGradient());
        double inputRel = Agreement.MaxRelative(gx, TorchReferenceNetwork.Values(tx.grad!));
        log.WriteLine($"blocks [{string.Join(',', blocks)}] hidden [{string.Join(',', hidden)}] {activation}: output {outRel:E2}, parameter gradient {gradRel:E2} (elementwise {gradElem:E2}), input gradient {inputRel:E2}");
        Assert.True(outRel < Tolerance, $"output differs by {outRel:E2}");
        Assert.True(gradRel < Tolerance, $"parameter gradient differs by {gradRel:E2}");
        Assert.True(gradElem < 1e-3, $"elementwise parameter gradient differs by {gradElem:E2}");
        Assert.True(inputRel < Tolerance, $"input gradient differs by {inputRel:E2}");
    }

    [Theory]
    [MemberData(nameof(Shapes))]
    public void SplitBackwardMatchesAutograd(int[] blocks, int[] hidden, int outputs, Activation activation, ulong seed)
    {
        using var scope = NewDisposeScope();
        var rng = new LearningRandom(seed + 100);
        var net = new DenseNetwork(new NetworkShape(blocks, hidden, outputs, activation));
        net.Initialise(seed + 100);
        RandomiseBiases(net, rng);
        int m = blocks.Length - 1;
        float[] xm = RandomVector(rng, blocks[m], 1.5f);
        float[] others = RandomVector(rng, hidden[0], 2f);
        float[] c = RandomVector(rng, outputs, 1f);

        var ws = net.CreateWorkspace();
        float[] y = new float[outputs], grad = new float[net.ParameterCount], gx = new float[xm.Length];
        net.ForwardSplit(m, xm, others, ws, y);
        net.Backward(ws, c, grad, gx);

        using var twin = new TorchReferenceNetwork(net);
        Tensor tx = twin.Tensor(xm, 1, xm.Length, requiresGrad: true);
        Tensor tOthers = twin.Tensor(others, 1, others.Length, requiresGrad: true);
        Tensor ty = twin.ForwardSplit(m, tx, tOthers);
        (ty * twin.Tensor(c, 1, outputs)).sum().backward();

        double gradRel = Agreement.MaxRelative(grad, twin.FlatGradient());
        double inputRel = Agreement.MaxRelative(gx, TorchReferenceNetwork.Values(tx.grad!));
        double othersRel = Agreement.MaxRelative(ws.FirstLayerDelta, TorchReferenceNetwork.Values(tOthers.grad!));
        log.WriteLine($"split block {m} of [{string.Join(',', blocks)}] {activation}: parameter gradient {gradRel:E2}, x_m gradient {inputRel:E2}, partial-sum gradient {othersRel:E2}");
        Assert.True(gradRel < Tolerance, $"parameter gradient differs by {gradRel:E2}");
        Assert.True(inputRel < Tolerance, $"input gradient differs by {inputRel:E2}");
        Assert.True(othersRel < Tolerance, $"partial-sum gradient differs by {othersRel:E2}");
        // Other blocks' columns receive no gradient in the split pass (autograd agrees: they are not in the graph).
        for (int k = 0; k < m; k++)
        {
            (int off, int len) = net.FirstLayerBlockRange(k);
            Assert.All(grad.AsSpan(off, len).ToArray(), g => Assert.Equal(0f, g));
        }
    }

    [Fact]
    public void PartialSumsMatchTorchMatmul()
    {
        using var scope = NewDisposeScope();
        var rng = new LearningRandom(5);
        var net = new DenseNetwork(new NetworkShape([4, 7, 3], [9], 2, Activation.Tanh));
        net.Initialise(5);
        using var twin = new TorchReferenceNetwork(net);
        for (int m = 0; m < 3; m++)
        {
            float[] xm = RandomVector(rng, net.Shape.InputBlocks[m], 2f);
            float[] a = new float[9];
            net.PartialSums(m, xm, a);
            double rel = Agreement.MaxRelative(a, TorchReferenceNetwork.Values(twin.PartialSums(m, twin.Tensor(xm, 1, xm.Length))));
            Assert.True(rel < Tolerance, $"partial sums of block {m} differ by {rel:E2}");
        }
    }

    [Theory]
    [InlineData(1, 4, 0.01, 21UL)]
    [InlineData(2, 3, 0.0, 22UL)]
    [InlineData(1, 6, 0.1, 23UL)]
    public void ActorLossGradientMatchesAutograd(int actionsPerHead, int heads, double entropy, ulong seed)
    {
        using var scope = NewDisposeScope();
        var rng = new LearningRandom(seed);
        int stateSize = 3;
        var net = new DenseNetwork(NetworkShape.Uniform(heads, stateSize, [10, 8], 2 * actionsPerHead * heads, Activation.Tanh));
        net.Initialise(seed);
        RandomiseBiases(net, rng);
        float[] x = RandomVector(rng, net.Shape.InputSize, 1f);
        int n = actionsPerHead * heads;
        float[] u = RandomVector(rng, n, 2f), adv = RandomVector(rng, heads, 1.5f);
        float[] lo = new float[n], hi = new float[n];
        for (int i = 0; i < n; i++)
        {
            lo[i] = rng.NextSingle(-2f, 0.5f);
            hi[i] = lo[i] + rng.NextSingle(0.1f, 3f);
        }
        const float logStdMin = -4f, logStdMax = 1f, weight = 0.25f;

        var ws = net.CreateWorkspace();
        float[] y = new float[net.Shape.OutputSize], dy = new float[y.Length], grad = new float[net.ParameterCount];
        net.Forward(x, ws, y);
        double loss = ActorCriticLoss.Actor(y, u, adv, lo, hi, actionsPerHead, entropy, logStdMin, logStdMax, weight, dy);
        net.Backward(ws, dy, grad);

        using var twin = new TorchReferenceNetwork(net);
        Tensor ty = twin.Forward(twin.Tensor(x, 1, x.Length)).reshape(y.Length);
        Tensor tl = TorchActorCriticLoss.Actor(ty, twin.Tensor(u, n), twin.Tensor(adv, heads), twin.Tensor(lo, n), twin.Tensor(hi, n),
            actionsPerHead, entropy, logStdMin, logStdMax, weight);
        tl.backward();
        double torchLoss = tl.item<double>();

        double lossRel = Math.Abs(loss - torchLoss) / Math.Abs(torchLoss);
        double gradRel = Agreement.MaxRelative(grad, twin.FlatGradient());
        log.WriteLine($"actor loss, {heads} heads × {actionsPerHead} actions, β = {entropy}: loss {lossRel:E2}, parameter gradient {gradRel:E2}");
        Assert.True(lossRel < Tolerance, $"loss {loss} vs {torchLoss}");
        Assert.True(gradRel < Tolerance, $"parameter gradient differs by {gradRel:E2}");
    }

    [Fact]
    public void CriticLossGradientMatchesAutograd()
    {
        using var scope = NewDisposeScope();
        var rng = new LearningRandom(31);
        var net = new DenseNetwork(NetworkShape.Uniform(5, 4, [12, 12], 5, Activation.Relu));
        net.Initialise(31);
        RandomiseBiases(net, rng);
        float[] x = RandomVector(rng, net.Shape.InputSize, 1f), targets = RandomVector(rng, 5, 3f);
        var ws = net.CreateWorkspace();
        float[] v = new float[5], dv = new float[5], grad = new float[net.ParameterCount];
        net.Forward(x, ws, v);
        double loss = ActorCriticLoss.Critic(v, targets, 0.5f, dv);
        net.Backward(ws, dv, grad);

        using var twin = new TorchReferenceNetwork(net);
        Tensor tl = TorchActorCriticLoss.Critic(twin.Forward(twin.Tensor(x, 1, x.Length)).reshape(5), twin.Tensor(targets, 5), 0.5);
        tl.backward();
        double lossRel = Math.Abs(loss - tl.item<double>()) / Math.Abs(tl.item<double>());
        double gradRel = Agreement.MaxRelative(grad, twin.FlatGradient());
        log.WriteLine($"critic loss: loss {lossRel:E2}, parameter gradient {gradRel:E2}");
        Assert.True(lossRel < Tolerance);
        Assert.True(gradRel < Tolerance, $"parameter gradient differs by {gradRel:E2}");
    }

    private static float[] RandomVector(LearningRandom rng, int n, float scale)
    {
        float[] v = new float[n];
        for (int i = 0; i < n; i++)
        {
            v[i] = rng.NextSingle(-scale, scale);
        }
        return v;
    }

    private static void RandomiseBiases(DenseNetwork net, LearningRandom rng)
    {
        for (int l = 0; l < net.LayerCount; l++)
        {
            Span<float> b = net.Parameters.Slice(net.BiasOffset(l), net.LayerOutputSize(l));
            for (int i = 0; i < b.Length; i++)
            {
                b[i] = rng.NextSingle(-0.3f, 0.3f);
            }
        }
    }
}
