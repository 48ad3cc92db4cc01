using FedGrid.Learning.Networks;
using FedGrid.Learning.Randomness;

namespace FedGrid.Learning.Tests;

internal static class TestData
{
    public static float[] Vector(LearningRandom rng, int n, float scale)
    {
        float[] v = new float[n];
        for (int i = 0; i < n; i++)
        {
            v[i] = rng.NextSingle(-scale, scale);
        }
        return v;
    }

    public static DenseNetwork Network(NetworkShape shape, ulong seed)
    {
        var net = new DenseNetwork(shape);
        net.Initialise(seed);
        var rng = new LearningRandom(seed ^ 0xABCDEF);
        for (int l = 0; l < net.LayerCount; l++)
        {
            Span<float> b = net.Parameters.Slice(net.BiasOffset(l), net.LayerOutputSize(l));
            for (int i = 0; i < b.Length; i++)
            {
                b[i] = rng.NextSingle(-0.3f, 0.3f);
            }
        }
        return net;
    }
}
