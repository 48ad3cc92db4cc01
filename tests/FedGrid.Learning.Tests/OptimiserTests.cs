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
}
