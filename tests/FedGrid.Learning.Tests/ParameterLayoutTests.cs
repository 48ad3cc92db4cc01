using FedGrid.Learning.Networks;
using FedGrid.Learning.Randomness;

namespace FedGrid.Learning.Tests;

public sealed class ParameterLayoutTests
{
    [Fact]
    public void SaveThenLoadReproducesTheNetworkExactly()
    {
        var shape = new NetworkShape([4, 4, 5], [16, 8], 6, Activation.Tanh);
        DenseNetwork a = TestData.Network(shape, 61);
        float[] flat = new float[a.ParameterCount];
        a.SaveParameters(flat);
        var b = new DenseNetwork(shape);
        b.LoadParameters(flat);
        Assert.Equal(a.Parameters.ToArray(), b.Parameters.ToArray());
        float[] x = TestData.Vector(new LearningRandom(62), shape.InputSize, 1f), ya = new float[6], yb = new float[6];
        a.Forward(x, a.CreateWorkspace(), ya);
        b.Forward(x, b.CreateWorkspace(), yb);
        Assert.Equal(ya, yb);
        Assert.Throws<ArgumentException>(() => b.LoadParameters(flat.AsSpan(1)));
    }

    [Fact]
    public void LayoutOffsetsFollowTheDocumentedOrder()
    {
        // blocks [2, 3], hidden [4, 5], output 2:
        // W_0 4×2 at 0, W_1 4×3 at 8, b₁ at 20, W₂ 5×4 at 24, b₂ at 44, W_out 2×5 at 49, b_out at 59, total 61.
        var net = new DenseNetwork(new NetworkShape([2, 3], [4, 5], 2, Activation.Tanh));
        Assert.Equal((0, 8), net.FirstLayerBlockRange(0));
        Assert.Equal((8, 12), net.FirstLayerBlockRange(1));
        Assert.Equal(20, net.BiasOffset(0));
        Assert.Equal((20, 41), net.SharedRange());
        Assert.Equal(24, net.WeightOffset(1));
        Assert.Equal(44, net.BiasOffset(1));
        Assert.Equal(49, net.WeightOffset(2));
        Assert.Equal(59, net.BiasOffset(2));
        Assert.Equal(61, net.ParameterCount);
    }

    [Fact]
    public void InitialisationIsSeededAndScaled()
    {
        var shape = new NetworkShape([3, 3], [32], 4, Activation.Relu);
        var a = new DenseNetwork(shape);
        var b = new DenseNetwork(shape);
        a.Initialise(5);
        b.Initialise(5);
        Assert.Equal(a.Parameters.ToArray(), b.Parameters.ToArray());
        b.Initialise(6);
        Assert.NotEqual(a.Parameters.ToArray(), b.Parameters.ToArray());
        // He-uniform limit √(6/6) = 1 on the ReLU first layer; Glorot √(6/36) on the output, times the scale 0.1.
        Assert.All(a.Parameters[..a.BiasOffset(0)].ToArray(), w => Assert.InRange(w, -1f, 1f));
        a.Initialise(5, outputScale: 0.1f);
        float limit = (float)(0.1 * Math.Sqrt(6.0 / 36));
        Assert.All(a.Parameters.Slice(a.WeightOffset(1), 128).ToArray(), w => Assert.InRange(w, -limit, limit));
        Assert.All(a.Parameters.Slice(a.BiasOffset(0), 32).ToArray(), w => Assert.Equal(0f, w));
    }

    [Fact]
    public void ShapesAndSpansAreValidated()
    {
        Assert.Throws<ArgumentException>(() => new NetworkShape([], [4], 1, Activation.Tanh));
        Assert.Throws<ArgumentException>(() => new NetworkShape([2], [], 1, Activation.Tanh));
        Assert.Throws<ArgumentException>(() => new NetworkShape([0], [4], 1, Activation.Tanh));
        var net = new DenseNetwork(new NetworkShape([2, 2], [3], 1, Activation.Tanh));
        var other = new DenseNetwork(new NetworkShape([2, 2], [3], 1, Activation.Tanh));
        float[] y = new float[1];
        Assert.Throws<ArgumentException>(() => net.Forward(new float[3], net.CreateWorkspace(), y));
        Assert.Throws<ArgumentException>(() => net.Forward(new float[4], other.CreateWorkspace(), y));
        Assert.Throws<ArgumentException>(() => net.PartialSums(0, new float[3], new float[3]));
        Assert.Throws<InvalidOperationException>(() => net.Backward(net.CreateWorkspace(), y, new float[net.ParameterCount]));
    }
}
