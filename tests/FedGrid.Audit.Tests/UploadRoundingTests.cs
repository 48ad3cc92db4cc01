using FedGrid.Audit.Attacks;
using Xunit.Abstractions;

namespace FedGrid.Audit.Tests;

/// <summary>
/// The weight/bias ratio attack on float32 uploads where rounding is the only error: one sample's SGD step on a float32
/// first layer (weights and biases of order 0.1), moved by about 1e-6 as at the default learning rates, uploaded as float32.
/// </summary>
public sealed class UploadRoundingTests(ITestOutputHelper output)
{
    private readonly ITestOutputHelper _output = output;

    private const int Rows = 64, Features = 8;

    /// <summary>One round: float32 first layers of an actor and a critic (<see cref="Rows"/> rows each), one sample's step, float32 upload.</summary>
    private static (FirstLayerUpdate[] Updates, double[] X, double[] Bound) Round(Random rng, int samples = 1)
    {
        var xs = new double[samples][];
        for (int s = 0; s < samples; s++)
        {
            xs[s] = new double[Features];
            // Private features in [0, 1] (as the state's scaled loads), stored by the household in float32.
            for (int j = 0; j < Features; j++) xs[s][j] = (float)rng.NextDouble();
        }
        var updates = new FirstLayerUpdate[2];
        var bound = new double[Features];
        Array.Fill(bound, double.PositiveInfinity);
        for (int net = 0; net < 2; net++)
        {
            var dw = new double[Rows * Features];
            var db = new double[Rows];
            var hw = new double[Rows * Features];
            var hb = new double[Rows];
            for (int o = 0; o < Rows; o++)
            {
                float b = (float)(0.2 * rng.NextDouble() - 0.1);
                // Step −η·c·δ_o per sample (learning rate × clipping scale × back-propagated error), in exact arithmetic; a quarter
                // of the rows are inactive units (δ_o = 0).
                var step = new double[samples];
                for (int s = 0; s < samples; s++) step[s] = rng.NextDouble() < 0.25 ? 0 : (rng.NextDouble() * 2 - 1) * 2e-6;
                float ub = (float)(b + step.Sum());
                db[o] = (double)ub - b;
                hb[o] = FirstLayerUpdate.HalfGap(ub);
                for (int j = 0; j < Features; j++)
                {
                    float w = (float)(0.4 * rng.NextDouble() - 0.2);
                    double change = 0;
                    for (int s = 0; s < samples; s++) change += step[s] * xs[s][j];
                    float uw = (float)(w + change);
                    dw[o * Features + j] = (double)uw - w;
                    hw[o * Features + j] = FirstLayerUpdate.HalfGap(uw);
                }
                // Derived bound: the truth lies in every row's box W_oj / B_o, so the midpoint of their intersection is within half
                // the narrowest box's width of it. Box half-width, to first order: (h_w + |x_j| h_b) / (|Δb_o| − h_b), with the
                // attack's arithmetic slack on both half-widths.
                double bh = hb[o] + UploadRatioAttack.StepArithmeticSlack * Math.Abs(db[o]);
                if (samples != 1 || !(Math.Abs(db[o]) > bh)) continue;
                for (int j = 0; j < Features; j++)
                {
                    double wh = hw[o * Features + j] + UploadRatioAttack.StepArithmeticSlack * Math.Abs(dw[o * Features + j]);
                    bound[j] = Math.Min(bound[j], (wh + Math.Abs(xs[0][j]) * bh) / (Math.Abs(db[o]) - bh) * (1 + 1e-6));
                }
            }
            updates[net] = new FirstLayerUpdate(Rows, dw, db) { WeightRounding = hw, BiasRounding = hb };
        }
        return (updates, xs[0], bound);
    }

    [Fact]
    public void Interval_estimate_beats_least_squares_and_stays_within_the_narrowest_rows_box()
    {
        var rng = new Random(7);
        double sseInterval = 0, sseLeast = 0, sseBound = 0;
        int count = 0;
        for (int round = 0; round < 40; round++)
        {
            (FirstLayerUpdate[] updates, double[] x, double[] bound) = Round(rng);
            UploadRatioAttack.RatioFit fit = UploadRatioAttack.Fit(updates, Features, []);
            Assert.NotNull(fit.Lower);
            for (int j = 0; j < Features; j++)
            {
                Assert.True(fit.IntervalBounds(j));
                Assert.True(fit.Lower![j] <= x[j] && x[j] <= fit.Upper![j], $"round {round} feature {j}: {x[j]} outside [{fit.Lower[j]}, {fit.Upper[j]}]");
                double e = fit.Estimate(j) - x[j], l = fit.LeastSquares[j] - x[j];
                Assert.True(Math.Abs(e) <= bound[j], $"round {round} feature {j}: error {e} above the bound {bound[j]}");
                sseInterval += e * e;
                sseLeast += l * l;
                sseBound += bound[j] * bound[j];
                count++;
            }
        }
        double rmsInterval = Math.Sqrt(sseInterval / count), rmsLeast = Math.Sqrt(sseLeast / count);
        _output.WriteLine($"interval {rmsInterval:E3}, least squares {rmsLeast:E3}, bound RMS {Math.Sqrt(sseBound / count):E3}");
        // About 1e-6 steps on weights of order 0.1: float32 keeps two or three digits of each change, so least squares over
        // 2 × 48 active rows is near 3e-4; the intersection shrinks like 1/rows instead of 1/√rows (measured 6.7e-5 against 3.0e-4).
        Assert.True(rmsLeast > 1e-4, $"least squares {rmsLeast}: the rounding must show");
        Assert.True(rmsInterval < rmsLeast / 3, $"interval {rmsInterval} against least squares {rmsLeast}");
        Assert.True(rmsInterval < Math.Sqrt(sseBound / count), $"interval {rmsInterval} against the bound's RMS {Math.Sqrt(sseBound / count)}");
    }

    [Fact]
    public void Known_features_narrow_the_bias_boxes_and_the_unknown_features_with_them()
    {
        var rng = new Random(11);
        double without = 0, with = 0;
        for (int round = 0; round < 20; round++)
        {
            (FirstLayerUpdate[] updates, double[] x, _) = Round(rng);
            // Features 4..7 public (the coordinator knows their values, as it knows price and time of day).
            double[] known = [.. Enumerable.Range(0, Features).Select(j => j >= 4 ? x[j] : double.NaN)];
            UploadRatioAttack.RatioFit a = UploadRatioAttack.Fit(updates, Features, []), b = UploadRatioAttack.Fit(updates, Features, known);
            for (int j = 0; j < 4; j++)
            {
                Assert.True(b.Lower![j] <= x[j] && x[j] <= b.Upper![j]);
                Assert.True(b.Upper[j] - b.Lower[j] <= a.Upper![j] - a.Lower![j] + 1e-18);
                without += Math.Pow(a.Estimate(j) - x[j], 2);
                with += Math.Pow(b.Estimate(j) - x[j], 2);
            }
        }
        _output.WriteLine($"with known features {Math.Sqrt(with / 80):E3}, without {Math.Sqrt(without / 80):E3}");
        Assert.True(with < without, $"with known features {Math.Sqrt(with / 80)}, without {Math.Sqrt(without / 80)}");
    }

    [Fact]
    public void Two_samples_leave_no_common_interval_and_the_estimate_is_the_least_squares()
    {
        var rng = new Random(3);
        (FirstLayerUpdate[] updates, _, _) = Round(rng, samples: 2);
        UploadRatioAttack.RatioFit fit = UploadRatioAttack.Fit(updates, Features, []);
        Assert.Null(fit.Lower);
        for (int j = 0; j < Features; j++) Assert.Equal(fit.LeastSquares[j], fit.Estimate(j));
    }
}
