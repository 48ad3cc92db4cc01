using FedGrid.Federation.Privacy;
using FedGrid.Federation.Schemes;
using FedGrid.Grid.Numerics;

namespace FedGrid.Federation.Tests;

public sealed class PrivacyAggregatorTests
{
    private static ReadOnlyMemory<float>[] Vectors(params float[][] v) => [.. v.Select(x => new ReadOnlyMemory<float>(x))];

    [Fact]
    public void MedianKnownAnswers()
    {
        IUploadAggregator median = new CoordinateMedianAggregator();
        var result = new float[2];
        median.Aggregate(Vectors([1, 10], [5, -2], [3, 7]), [1, 1, 1], result);
        Assert.Equal([3f, 7f], result);
        median.Aggregate(Vectors([1, 10], [5, -2], [3, 7], [100, 0]), [1, 1, 1, 1], result);
        Assert.Equal([4f, 3.5f], result); // even count: mean of the two middle values
        Assert.Equal("median", median.Name);
    }

    [Fact]
    public void TrimmedMeanKnownAnswers()
    {
        var trimmed = new TrimmedMeanAggregator(0.2);
        var result = new float[1];
        // K = 5, ⌊0.2·5⌋ = 1 from each end: mean of {2, 3, 4}.
        trimmed.Aggregate(Vectors([1], [2], [3], [4], [1000]), [1, 1, 1, 1, 1], result);
        Assert.Equal(3f, result[0]);
        Assert.Equal(1, trimmed.Trimmed(5));
        new TrimmedMeanAggregator(0).Aggregate(Vectors([1], [2], [6]), [1, 1, 1], result);
        Assert.Equal(3f, result[0]);
        Assert.Throws<ArgumentOutOfRangeException>(() => new TrimmedMeanAggregator(0.5));
        Assert.Equal("trimmed-mean", trimmed.Name);
    }

    [Theory]
    [InlineData("scaled")]
    [InlineData("sign-flipped")]
    public void RobustRulesResistAPoisonedMinority(string attack)
    {
        // 20 honest uploads near θ* (noise 0.01), 4 malicious ones (20 %): scaled by 100, or sign-flipped and scaled by 10.
        const int honest = 16, malicious = 4, length = 200;
        var random = new SeededRandom(5);
        float[] target = [.. Enumerable.Range(0, length).Select(_ => (float)random.NextDouble(-1, 1))];
        var uploads = new List<float[]>();
        for (int k = 0; k < honest; k++)
        {
            uploads.Add([.. target.Select(t => (float)(t + 0.01 * random.NextGaussian()))]);
        }
        for (int k = 0; k < malicious; k++)
        {
            uploads.Add([.. target.Select(t => attack == "scaled" ? 100 * t : -10 * t)]);
        }
        ReadOnlyMemory<float>[] vectors = Vectors([.. uploads]);
        double[] weights = [.. Enumerable.Repeat(50.0, honest + malicious)];
        double Error(IUploadAggregator rule)
        {
            var r = new float[length];
            rule.Aggregate(vectors, weights, r);
            return Math.Sqrt(r.Zip(target).Sum(p => (p.First - p.Second) * (double)(p.First - p.Second)) / length);
        }
        double mean = Error(new FedAvgAggregator());
        double median = Error(new CoordinateMedianAggregator());
        double trimmed = Error(new TrimmedMeanAggregator(0.2));
        Assert.True(mean > 1, $"{attack}: FedAvg RMS error {mean:F3} should be broken");
        Assert.True(median < 0.02, $"{attack}: median RMS error {median:F4}");
        Assert.True(trimmed < 0.02, $"{attack}: trimmed-mean RMS error {trimmed:F4}");
    }

    [Fact]
    public void RulesByName()
    {
        Assert.IsType<FedAvgAggregator>(UploadAggregators.Create("fedavg"));
        Assert.IsType<CoordinateMedianAggregator>(UploadAggregators.Create("median"));
        Assert.Equal(0.25, Assert.IsType<TrimmedMeanAggregator>(UploadAggregators.Create("trimmed-mean", 0.25)).TrimFraction);
        Assert.Contains("known: fedavg, median, trimmed-mean", Assert.Throws<ArgumentException>(() => UploadAggregators.Create("mean")).Message);
    }

    [Fact]
    public void InputsAreChecked()
    {
        var median = new CoordinateMedianAggregator();
        var r = new float[2];
        Assert.Throws<ArgumentException>(() => median.Aggregate(Vectors([1, 2], [1]), [1, 1], r));
        Assert.Throws<ArgumentException>(() => median.Aggregate(Vectors([1, 2]), [1, 1], r));
        Assert.Throws<ArgumentException>(() => median.Aggregate(Vectors([1, float.NaN]), [1], r));
        Assert.Throws<ArgumentException>(() => median.Aggregate(Vectors([1, 2]), [-1], r));
        Assert.Throws<ArgumentException>(() => median.Aggregate(Vectors(), [], r));
    }
}
