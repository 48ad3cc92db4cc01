using FedGrid.Federation.Households;
using FedGrid.Learning.Networks;

namespace FedGrid.Federation.Tests;

/// <summary>
/// The precondition of local training's ranged clearing, clipping and optimiser steps: after a split forward pass of
/// household m and a backward pass from its own head, every non-zero gradient entry lies in
/// <see cref="LocalTrainer.TrainedRanges"/> (the ranges are ascending and do not overlap).
/// </summary>
public sealed class LocalTrainerRangesTests
{
    [Theory]
    [InlineData(0, 2)]
    [InlineData(3, 2)]
    [InlineData(4, 1)]
    public void SplitBackwardFillsOnlyTheTrainedRanges(int household, int outputsPerHousehold)
    {
        const int blocks = 5, features = 3;
        var network = new DenseNetwork(NetworkShape.Uniform(blocks, features, [8, 6], blocks * outputsPerHousehold, Activation.Tanh));
        network.Initialise(42);
        var rng = new Random(3);
        float[] x = [.. Enumerable.Range(0, features).Select(_ => (float)(rng.NextDouble() - 0.5))];
        float[] others = [.. Enumerable.Range(0, 8).Select(_ => (float)(rng.NextDouble() - 0.5))];
        var ws = network.CreateWorkspace();
        float[] output = new float[network.Shape.OutputSize], outGrad = new float[output.Length], grad = new float[network.ParameterCount];
        network.ForwardSplit(household, x, others, ws, output);
        for (int k = 0; k < outputsPerHousehold; k++) outGrad[household * outputsPerHousehold + k] = 1f + k;
        network.Backward(ws, outGrad, grad);

        var ranges = LocalTrainer.TrainedRanges(network, household, outputsPerHousehold);
        var inside = new bool[grad.Length];
        int end = 0;
        foreach (var (o, n) in ranges)
        {
            Assert.True(o >= end, "ranges ascending, not overlapping");
            end = o + n;
            for (int i = o; i < o + n; i++) inside[i] = true;
        }
        int nonZeroInside = 0;
        for (int i = 0; i < grad.Length; i++)
        {
            if (!inside[i]) Assert.Equal(0f, grad[i]);
            else if (grad[i] != 0) nonZeroInside++;
        }
        Assert.True(nonZeroInside > 0);
        // Every parameter the household trains is inside: its first-layer columns and its head's biases.
        var (bo, bn) = network.FirstLayerBlockRange(household);
        Assert.All(Enumerable.Range(bo, bn), i => Assert.True(inside[i]));
        int lastBias = network.BiasOffset(network.LayerCount - 1) + household * outputsPerHousehold;
        Assert.All(Enumerable.Range(lastBias, outputsPerHousehold), i => Assert.True(inside[i]));
    }
}
