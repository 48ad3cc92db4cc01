using FedGrid.Learning.Optimisation;

namespace FedGrid.Learning.Tests;

public sealed class OptimiserTests
{
    [Fact]
    public void AdamFollowsKingmaBaAlgorithmOne()
    {
        // Kingma & Ba (2015), Algorithm 1, worked by hand with α = 0.1, β₁ = 0.9, β₂ = 0.999, ε = 1e-8.
        // θ₀ = (1, −2); g₁ = (0.5, −1); g₂ = (−0.2, 0.4).
        // t=1: m = (0.05, −0.1), v = (0.00025, 0.001); m̂ = (0.5, −1), v̂ = (0.25, 1) → step α·m̂/(√v̂+ε) = (0.1, −0.1)
        //      θ₁ = (0.9, −1.9)  (the first step has size α per coordinate, as the paper notes).
        // t=2: m = 0.9·m + 0.1·g = (0.025, −0.05); v = 0.999·v + 0.001·g² = (0.00028975, 0.001159);
        //      m̂ = m/(1−0.81) = (0.131578947, −0.263157895); v̂ = v/(1−0.998001) = (0.144947474, 0.579789895)
        //      step = 0.1·m̂/(√v̂+ε) = (0.034560, −0.034560) → θ₂ = (0.865440, −1.865440).
        var adam = new Adam(2, learningRate: 0.1, beta1: 0.9, beta2: 0.999, epsilon: 1e-8);
        float[] theta = [1f, -2f];
        adam.Step(theta, [0.5f, -1f]);
        Assert.Equal(0.9f, theta[0], 1e-6f);
        Assert.Equal(-1.9f, theta[1], 1e-6f);
        adam.Step(theta, [-0.2f, 0.4f]);
        double m0 = 0.025 / 0.19, v0 = 0.00028975 / (1 - 0.998001);
        double expected0 = 0.9 - 0.1 * m0 / (Math.Sqrt(v0) + 1e-8);
        Assert.Equal(expected0, theta[0], 1e-6);
        Assert.Equal(0.865440, theta[0], 1e-5);
        Assert.Equal(-1.865440, theta[1], 1e-5);
        Assert.Equal(2, adam.StepCount);
        adam.Reset();
        Assert.Equal(0, adam.StepCount);
    }

    [Fact]
    public void AdamMinimisesAQuadratic()
    {
        var adam = new Adam(3, learningRate: 0.05);
        float[] theta = [3f, -2f, 0.5f];
        float[] g = new float[3];
        float[] target = [1f, 1f, -1f];
        for (int t = 0; t < 2000; t++)
        {
            for (int i = 0; i < 3; i++)
            {
                g[i] = 2 * (theta[i] - target[i]);
            }
            adam.Step(theta, g);
        }
        for (int i = 0; i < 3; i++)
        {
            Assert.Equal(target[i], theta[i], 1e-2f);
        }
    }

    [Fact]
    public void SgdWithMomentumFollowsTheHeavyBallRule()
    {
        // u₁ = g₁ = 1 → θ = 1 − 0.1 = 0.9; u₂ = 0.5·1 + 2 = 2.5 → θ = 0.9 − 0.25 = 0.65.
        var sgd = new Sgd(1, learningRate: 0.1, momentum: 0.5);
        float[] theta = [1f];
        sgd.Step(theta, [1f]);
        Assert.Equal(0.9f, theta[0], 1e-6f);
        sgd.Step(theta, [2f]);
        Assert.Equal(0.65f, theta[0], 1e-6f);
        sgd.Reset(); // momentum forgotten: the next step is plain
        sgd.Step(theta, [1f]);
        Assert.Equal(0.55f, theta[0], 1e-6f);
        Assert.Equal(1, sgd.StepCount);
        var plain = new Sgd(1, learningRate: 0.1);
        float[] p = [1f];
        plain.Step(p, [3f]);
        Assert.Equal(0.7f, p[0], 1e-6f);
    }

    [Fact]
    public void ClippingScalesToTheGlobalNorm()
    {
        float[] g = [3f, 4f];
        Assert.Equal(5.0, GradientClipping.ClipGlobalNorm(g, 1.0), 1e-9);
        Assert.Equal(0.6f, g[0], 1e-6f);
        Assert.Equal(0.8f, g[1], 1e-6f);
        float[] small = [0.3f, 0.4f];
        Assert.Equal(0.5, GradientClipping.ClipGlobalNorm(small, 1.0), 1e-6);
        Assert.Equal([0.3f, 0.4f], small);
    }

    [Fact]
    public void AdamMatchesAlgorithmOneBitForBitOnVectorBodyAndTail()
    {
        // Kingma & Ba (2015), Algorithm 1, written out per coordinate in double precision (moments in double, the
        // parameter rounded to float after each step); 37 coordinates exercise the vectorised body and the scalar tail.
        const int n = 37;
        const double lr = 1e-3, b1 = 0.9, b2 = 0.999, eps = 1e-8;
        var rng = new Random(11);
        var adam = new Adam(n, lr, b1, b2, eps);
        float[] theta = new float[n], reference = new float[n], g = new float[n];
        double[] m = new double[n], v = new double[n];
        for (int i = 0; i < n; i++) theta[i] = reference[i] = (float)(rng.NextDouble() * 2 - 1);
        double p1 = 1, p2 = 1;
        for (int t = 0; t < 25; t++)
        {
            for (int i = 0; i < n; i++) g[i] = (float)((rng.NextDouble() * 2 - 1) * Math.Pow(10, rng.Next(-6, 2)));
            adam.Step(theta, g);
            p1 *= b1;
            p2 *= b2;
            double c1 = 1.0 / (1.0 - p1), c2 = 1.0 / (1.0 - p2);
            for (int i = 0; i < n; i++)
            {
                m[i] = b1 * m[i] + (1 - b1) * g[i];
                v[i] = b2 * v[i] + (1 - b2) * g[i] * (double)g[i];
                reference[i] = (float)(reference[i] - lr * (m[i] * c1) / (Math.Sqrt(v[i] * c2) + eps));
            }
            for (int i = 0; i < n; i++) Assert.Equal(BitConverter.SingleToInt32Bits(reference[i]), BitConverter.SingleToInt32Bits(theta[i]));
        }
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void RangedStepsEqualFullStepsBitForBitWhenTheGradientIsZeroOutside(bool adam)
    {
        // The contract of IOptimiser.Step(…, ranges): with the gradient zero outside the ranges since the last reset, the
        // parameters come out exactly as from the full step (the parameters outside are left alone).
        const int n = 103;
        (int, int)[] ranges = [(3, 17), (40, 9), (60, 41)];
        var rng = new Random(5);
        IOptimiser full = adam ? new Adam(n, 1e-2) : new Sgd(n, 1e-2, momentum: 0.9);
        IOptimiser ranged = adam ? new Adam(n, 1e-2) : new Sgd(n, 1e-2, momentum: 0.9);
        float[] a = new float[n], b = new float[n], g = new float[n];
        for (int i = 0; i < n; i++) a[i] = b[i] = (float)(rng.NextDouble() - 0.5);
        for (int t = 0; t < 10; t++)
        {
            Array.Clear(g);
            foreach (var (o, len) in ranges)
                for (int i = o; i < o + len; i++) g[i] = (float)(rng.NextDouble() - 0.5);
            full.Step(a, g);
            ranged.Step(b, g, ranges);
        }
        Assert.Equal(full.StepCount, ranged.StepCount);
        for (int i = 0; i < n; i++) Assert.Equal(BitConverter.SingleToInt32Bits(a[i]), BitConverter.SingleToInt32Bits(b[i]));
        Assert.Throws<ArgumentOutOfRangeException>(() => ranged.Step(b, g, [(100, 4)]));
    }

    [Fact]
    public void RangedClippingEqualsFullClippingBitForBit()
    {
        const int n = 90;
        (int, int)[] ranges = [(0, 10), (20, 33), (70, 13)];
        var rng = new Random(7);
        float[] a = new float[n];
        foreach (var (o, len) in ranges)
            for (int i = o; i < o + len; i++) a[i] = (float)(rng.NextDouble() * 4 - 2);
        float[] b = (float[])a.Clone();
        double fullNorm = GradientClipping.ClipGlobalNorm(a, 0.5);
        double rangedNorm = GradientClipping.ClipGlobalNorm(b, 0.5, ranges);
        Assert.Equal(BitConverter.DoubleToInt64Bits(fullNorm), BitConverter.DoubleToInt64Bits(rangedNorm));
        Assert.True(fullNorm > 0.5);
        for (int i = 0; i < n; i++) Assert.Equal(BitConverter.SingleToInt32Bits(a[i]), BitConverter.SingleToInt32Bits(b[i]));
        Assert.Throws<ArgumentException>(() => GradientClipping.ClipGlobalNorm(b, 0.5, [(20, 5), (0, 5)]));
    }
}
