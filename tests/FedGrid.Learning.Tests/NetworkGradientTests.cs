using FedGrid.Learning.ActorCritic;
using FedGrid.Learning.Networks;
using FedGrid.Learning.Policies;
using FedGrid.Learning.Randomness;

namespace FedGrid.Learning.Tests;

/// <summary>Hand-written backward passes against central finite differences of an independent double-precision forward pass.</summary>
public sealed class NetworkGradientTests
{
    public static TheoryData<int[], int[], int, Activation> Shapes => new()
    {
        { new[] { 3, 2 }, new[] { 5 }, 2, Activation.Tanh },
        { new[] { 4, 4, 4 }, new[] { 7, 6 }, 3, Activation.Tanh },
        { new[] { 2, 5 }, new[] { 9, 4 }, 4, Activation.Relu },
        { new[] { 1, 3, 2, 6 }, new[] { 13, 5, 6 }, 5, Activation.Relu },
    };

    [Theory]
    [MemberData(nameof(Shapes))]
    public void ParameterAndInputGradientsMatchFiniteDifferences(int[] blocks, int[] hidden, int outputs, Activation activation)
    {
        var shape = new NetworkShape(blocks, hidden, outputs, activation);
        DenseNetwork net = TestData.Network(shape, 7);
        var rng = new LearningRandom(9);
        float[] x = TestData.Vector(rng, shape.InputSize, 1.5f);
        float[] c = TestData.Vector(rng, outputs, 1f);

        var ws = net.CreateWorkspace();
        float[] y = new float[outputs], grad = new float[net.ParameterCount], gx = new float[x.Length];
        net.Forward(x, ws, y);
        net.Backward(ws, c, grad, gx);

        double[] p = DoubleReference.ToDouble(net.Parameters), xd = DoubleReference.ToDouble(x), cd = DoubleReference.ToDouble(c);
        double Loss(double[] theta) => DoubleReference.Forward(shape, theta, xd).Zip(cd, (a, b) => a * b).Sum();
        double[] fd = DoubleReference.Gradient(p, Loss);
        double[] fdx = DoubleReference.Gradient(xd, input => DoubleReference.Forward(shape, p, input).Zip(cd, (a, b) => a * b).Sum());

        Assert.True(DoubleReference.RelativeError(y, DoubleReference.Forward(shape, p, xd)) < 1e-5);
        double e = DoubleReference.RelativeError(grad, fd), ex = DoubleReference.RelativeError(gx, fdx);
        Assert.True(e < 1e-4, $"parameter gradient relative error {e:E2}");
        Assert.True(ex < 1e-4, $"input gradient relative error {ex:E2}");
    }

    [Fact]
    public void BackwardAccumulatesIntoTheGradient()
    {
        var shape = new NetworkShape([3, 3], [4], 2, Activation.Tanh);
        DenseNetwork net = TestData.Network(shape, 3);
        var ws = net.CreateWorkspace();
        var rng = new LearningRandom(4);
        float[] x1 = TestData.Vector(rng, 6, 1f), x2 = TestData.Vector(rng, 6, 1f), c = [1f, -0.5f];
        float[] y = new float[2], once1 = new float[net.ParameterCount], once2 = new float[net.ParameterCount], both = new float[net.ParameterCount];
        net.Forward(x1, ws, y); net.Backward(ws, c, once1);
        net.Forward(x2, ws, y); net.Backward(ws, c, once2);
        net.Forward(x1, ws, y); net.Backward(ws, c, both);
        net.Forward(x2, ws, y); net.Backward(ws, c, both);
        for (int i = 0; i < both.Length; i++)
        {
            Assert.Equal(once1[i] + once2[i], both[i], 1e-6f);
        }
    }

    [Theory]
    [InlineData(1, 3, 0.01)]
    [InlineData(2, 2, 0.05)]
    public void ActorLossGradientMatchesFiniteDifferences(int k, int heads, double beta)
    {
        var shape = NetworkShape.Uniform(heads, 3, [8, 6], 2 * k * heads, Activation.Tanh);
        DenseNetwork net = TestData.Network(shape, 17);
        var rng = new LearningRandom(18);
        int n = k * heads;
        float[] x = TestData.Vector(rng, shape.InputSize, 1f), u = TestData.Vector(rng, n, 1.5f), adv = TestData.Vector(rng, heads, 2f);
        float[] lo = Enumerable.Range(0, n).Select(i => -1f + 0.1f * i).ToArray(), hi = lo.Select(v => v + 2.5f).ToArray();
        const float min = -4f, max = 1f, w = 0.5f;

        var ws = net.CreateWorkspace();
        float[] y = new float[shape.OutputSize], dy = new float[y.Length], grad = new float[net.ParameterCount];
        net.Forward(x, ws, y);
        double loss = ActorCriticLoss.Actor(y, u, adv, lo, hi, k, beta, min, max, w, dy);
        net.Backward(ws, dy, grad);

        double[] xd = DoubleReference.ToDouble(x), p = DoubleReference.ToDouble(net.Parameters);
        // Independent loss in double: log N(u; μ, σ) − log(1 − tanh²u) − log((hi − lo)/2), entropy ½log(2πe) + log σ.
        double Loss(double[] theta)
        {
            double[] o = DoubleReference.Forward(shape, theta, xd);
            double total = 0;
            for (int m = 0; m < heads; m++)
            {
                for (int j = 0; j < k; j++)
                {
                    double mean = o[2 * k * m + j], raw = o[2 * k * m + k + j];
                    double logStd = min + (max - min) * 0.5 * (Math.Tanh(raw) + 1);
                    double sigma = Math.Exp(logStd), uu = u[k * m + j];
                    double t = Math.Tanh(uu);
                    double logp = -0.5 * Math.Pow((uu - mean) / sigma, 2) - logStd - 0.5 * Math.Log(2 * Math.PI)
                                  - Math.Log(1 - t * t) - Math.Log((hi[k * m + j] - lo[k * m + j]) / 2);
                    double entropy = 0.5 * Math.Log(2 * Math.PI * Math.E) + logStd;
                    total += w * (adv[m] * logp - beta * entropy);
                }
            }
            return total;
        }
        double reference = Loss(p);
        Assert.True(Math.Abs(reference - loss) <= 1e-5 * Math.Abs(reference), $"loss {loss} vs {reference}");
        double e = DoubleReference.RelativeError(grad, DoubleReference.Gradient(p, Loss));
        Assert.True(e < 1e-4, $"actor gradient relative error {e:E2}");
    }

    [Fact]
    public void CriticLossGradientMatchesFiniteDifferences()
    {
        var shape = NetworkShape.Uniform(3, 2, [6], 3, Activation.Relu);
        DenseNetwork net = TestData.Network(shape, 27);
        var rng = new LearningRandom(28);
        float[] x = TestData.Vector(rng, 6, 1f), r = TestData.Vector(rng, 3, 2f);
        var ws = net.CreateWorkspace();
        float[] v = new float[3], dv = new float[3], grad = new float[net.ParameterCount];
        net.Forward(x, ws, v);
        ActorCriticLoss.Critic(v, r, 0.25f, dv);
        net.Backward(ws, dv, grad);
        double[] xd = DoubleReference.ToDouble(x), p = DoubleReference.ToDouble(net.Parameters);
        double Loss(double[] theta) => DoubleReference.Forward(shape, theta, xd).Select((val, i) => 0.125 * Math.Pow(val - r[i], 2)).Sum();
        double e = DoubleReference.RelativeError(grad, DoubleReference.Gradient(p, Loss));
        Assert.True(e < 1e-4, $"critic gradient relative error {e:E2}");
    }

    [Theory]
    [InlineData(-3.0)]
    [InlineData(-0.4)]
    [InlineData(0.0)]
    [InlineData(2.5)]
    [InlineData(15.0)]
    public void SquashedGaussianPiecesAgreeWithTheirDefinitions(double u)
    {
        double t = Math.Tanh(u);
        if (Math.Abs(u) < 10)
        {
            Assert.Equal(Math.Log(1 - t * t), SquashedGaussian.LogTanhJacobian(u), 1e-9);
        }
        else
        {
            // log(1 − tanh²u) = log(sech²u) ≈ 2(log 2 − |u|) for large |u|
            Assert.Equal(2 * (Math.Log(2) - Math.Abs(u)), SquashedGaussian.LogTanhJacobian(u), 1e-9);
        }
        Assert.InRange(SquashedGaussian.Squash((float)u, 2f, 5f), 2f, 5f);
        float raw = (float)(u / 3);
        const float min = -3f, max = 0.5f;
        double h = 1e-3;
        double numeric = (SquashedGaussian.LogStd((float)(raw + h), min, max) - SquashedGaussian.LogStd((float)(raw - h), min, max)) / (2 * h);
        Assert.Equal(numeric, SquashedGaussian.LogStdDerivative(raw, min, max), 1e-3);
    }

    [Fact]
    public void SquashedLogDensityIntegratesToOneOnTheBox()
    {
        // ∫ π(a) da over [lo, hi] = 1 (change of variables): midpoint rule on a fine grid in a.
        const double lo = 1.5, hi = 4.0, mean = 0.3, logStd = -0.2;
        int n = 200_000;
        double sum = 0, da = (hi - lo) / n;
        for (int i = 0; i < n; i++)
        {
            double a = lo + (i + 0.5) * da;
            double u = Math.Atanh(2 * (a - lo) / (hi - lo) - 1);
            sum += Math.Exp(SquashedGaussian.LogProb(u, mean, logStd, lo, hi)) * da;
        }
        Assert.Equal(1.0, sum, 1e-4);
    }
}
