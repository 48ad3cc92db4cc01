using FedGrid.Learning.Networks;
using FedGrid.Learning.Randomness;

namespace FedGrid.Learning.Tests;

/// <summary>Identity of the federated scheme: the split first layer equals the unsplit one (DESIGN.md §7).</summary>
public sealed class SplitLayerTests
{
    public static TheoryData<int[], int[], Activation> Shapes => new()
    {
        { new[] { 6, 6, 6, 6, 6, 6, 6, 6 }, new[] { 64, 64 }, Activation.Tanh },
        { new[] { 3, 1, 7, 2 }, new[] { 5, 8 }, Activation.Relu },
        { new[] { 4 }, new[] { 3 }, Activation.Tanh },
    };

    [Theory]
    [MemberData(nameof(Shapes))]
    public void SplitForwardEqualsUnsplitForwardForEveryBlock(int[] blocks, int[] hidden, Activation activation)
    {
        var shape = new NetworkShape(blocks, hidden, 5, activation);
        DenseNetwork net = TestData.Network(shape, 41);
        var rng = new LearningRandom(42);
        float[] x = TestData.Vector(rng, shape.InputSize, 2f);
        var ws = net.CreateWorkspace();
        float[] full = new float[5], split = new float[5];
        net.Forward(x, ws, full);

        int h1 = shape.FirstLayerSize;
        float[][] partial = new float[blocks.Length][];
        int offset = 0;
        for (int m = 0; m < blocks.Length; m++)
        {
            partial[m] = new float[h1];
            net.PartialSums(m, x.AsSpan(offset, blocks[m]), partial[m]);
            offset += blocks[m];
        }
        offset = 0;
        float[] others = new float[h1];
        for (int m = 0; m < blocks.Length; m++)
        {
            // The coordinator's reply to household m: Σ_{k≠m} a_k.
            Array.Clear(others);
            for (int k = 0; k < blocks.Length; k++)
            {
                if (k != m)
                {
                    for (int o = 0; o < h1; o++)
                    {
                        others[o] += partial[k][o];
                    }
                }
            }
            net.ForwardSplit(m, x.AsSpan(offset, blocks[m]), others, ws, split);
            offset += blocks[m];
            // Relative to the output vector's size (‖split − full‖∞ / ‖full‖∞): the two differ only in the order
            // in which the blocks' partial sums are added.
            double rel = DoubleReference.RelativeError(split, DoubleReference.ToDouble(full));
            Assert.True(rel <= 1e-6, $"block {m}: split differs from full by {rel:E2} relative");
        }
    }

    [Fact]
    public void SplitBackwardGivesTheBlocksShareOfTheFullGradient()
    {
        var shape = new NetworkShape([3, 4, 2], [6, 5], 3, Activation.Tanh);
        DenseNetwork net = TestData.Network(shape, 51);
        var rng = new LearningRandom(52);
        float[] x = TestData.Vector(rng, shape.InputSize, 1f), c = TestData.Vector(rng, 3, 1f);
        var ws = net.CreateWorkspace();
        float[] y = new float[3], full = new float[net.ParameterCount], split = new float[net.ParameterCount];
        net.Forward(x, ws, y);
        net.Backward(ws, c, full);
        float[] fullDelta = ws.FirstLayerDelta.ToArray();

        const int m = 1;
        float[] a0 = new float[6], a2 = new float[6], others = new float[6];
        net.PartialSums(0, x.AsSpan(0, 3), a0);
        net.PartialSums(2, x.AsSpan(7, 2), a2);
        for (int o = 0; o < 6; o++)
        {
            others[o] = a0[o] + a2[o];
        }
        net.ForwardSplit(m, x.AsSpan(3, 4), others, ws, y);
        net.Backward(ws, c, split);

        (int own, int ownLength) = net.FirstLayerBlockRange(m);
        for (int i = 0; i < net.ParameterCount; i++)
        {
            bool otherBlock = i < net.SharedRange().Offset && (i < own || i >= own + ownLength);
            if (otherBlock)
            {
                Assert.Equal(0f, split[i]);
            }
            else
            {
                Assert.True(Math.Abs(split[i] - full[i]) <= 1e-5 * Math.Max(1e-3, Math.Abs(full[i])), $"parameter {i}");
            }
        }
        for (int o = 0; o < 6; o++)
        {
            Assert.Equal(fullDelta[o], ws.FirstLayerDelta[o], 1e-5f);
        }
    }

    [Fact]
    public void PartialSumsOfAllBlocksPlusBiasArePreActivation()
    {
        var shape = new NetworkShape([2, 3], [4], 1, Activation.Relu);
        var net = new DenseNetwork(shape);
        // Hand example in the documented layout: W_0 (4×2), W_1 (4×3), b₁ (4), W_out (1×4), b_out (1).
        float[] p =
        [
            1, 2, 0, 1, -1, 0, 0.5f, 0.5f,          // W_0 rows
            1, 0, 0, 0, 1, 0, 0, 0, 1, 1, 1, 1,     // W_1 rows
            0.1f, 0.2f, 0.3f, -10f,                 // b₁
            1, 1, 1, 1,                             // W_out
            0.5f,                                   // b_out
        ];
        net.LoadParameters(p);
        float[] x = [1, 2, 3, 4, 5];
        float[] a0 = new float[4], a1 = new float[4];
        net.PartialSums(0, x.AsSpan(0, 2), a0);
        net.PartialSums(1, x.AsSpan(2, 3), a1);
        Assert.Equal([5f, 2f, -1f, 1.5f], a0);
        Assert.Equal([3f, 4f, 5f, 12f], a1);
        // z = a0 + a1 + b = [8.1, 6.2, 4.3, 3.5]; ReLU; sum + 0.5 = 22.6
        float[] y = new float[1];
        net.Forward(x, net.CreateWorkspace(), y);
        Assert.Equal(22.6f, y[0], 1e-5f);
    }
}
