using FedGrid.Federation.Schemes;

namespace FedGrid.Federation.Privacy;

/// <summary>
/// Coordinate-wise median of the uploads (Yin, Chen, Ramchandran &amp; Bartlett 2018): for every parameter the median
/// over households (the mean of the two middle values for an even count). Robust to fewer than half of the uploads
/// being arbitrary. Sample counts are checked but not used: a poisoned household could claim any weight.
/// The column buffer grows to the upload count once and is reused (no allocation per call after that).
/// </summary>
public sealed class CoordinateMedianAggregator : IUploadAggregator
{
    private float[] _column = [];

    /// <summary>Rule name.</summary>
    public const string RuleName = "median";

    /// <inheritdoc />
    public string Name => RuleName;

    /// <inheritdoc />
    public void Aggregate(IReadOnlyList<ReadOnlyMemory<float>> vectors, ReadOnlySpan<double> weights, Span<float> result)
    {
        RobustColumns.Check(vectors, weights, result, RuleName);
        int count = vectors.Count;
        Span<float> column = RobustColumns.Buffer(ref _column, count);
        for (int i = 0; i < result.Length; i++)
        {
            RobustColumns.Gather(vectors, i, column);
            column.Sort();
            result[i] = (count & 1) == 1
                ? column[count / 2]
                : (float)(0.5 * ((double)column[(count / 2) - 1] + column[count / 2]));
        }
    }
}

/// <summary>
/// Coordinate-wise trimmed mean (Yin et al. 2018): for every parameter, drop the ⌊βK⌋ largest and ⌊βK⌋ smallest of the
/// K uploads' values and average the rest (double precision). β = 0 is the unweighted mean; β must leave at least one
/// value. Tolerates up to ⌊βK⌋ arbitrary uploads. Sample counts are checked but not used.
/// </summary>
public sealed class TrimmedMeanAggregator : IUploadAggregator
{
    private float[] _column = [];

    /// <summary>Rule name.</summary>
    public const string RuleName = "trimmed-mean";

    /// <summary>Creates the rule.</summary>
    /// <param name="trimFraction">β in [0, 0.5): the fraction trimmed from each end.</param>
    public TrimmedMeanAggregator(double trimFraction)
    {
        if (!(trimFraction >= 0 && trimFraction < 0.5))
        {
            throw new ArgumentOutOfRangeException(nameof(trimFraction), trimFraction, "the trimmed fraction per end must be in [0, 0.5)");
        }
        TrimFraction = trimFraction;
    }

    /// <summary>β.</summary>
    public double TrimFraction { get; }

    /// <inheritdoc />
    public string Name => RuleName;

    /// <summary>Values trimmed from each end for K uploads: ⌊βK⌋.</summary>
    /// <param name="uploads">K.</param>
    /// <returns>⌊βK⌋.</returns>
    public int Trimmed(int uploads) => (int)Math.Floor(TrimFraction * uploads);

    /// <inheritdoc />
    public void Aggregate(IReadOnlyList<ReadOnlyMemory<float>> vectors, ReadOnlySpan<double> weights, Span<float> result)
    {
        RobustColumns.Check(vectors, weights, result, RuleName);
        int count = vectors.Count;
        int b = Trimmed(count);
        Span<float> column = RobustColumns.Buffer(ref _column, count);
        for (int i = 0; i < result.Length; i++)
        {
            RobustColumns.Gather(vectors, i, column);
            column.Sort();
            double sum = 0;
            for (int k = b; k < count - b; k++)
            {
                sum += column[k];
            }
            result[i] = (float)(sum / (count - 2 * b));
        }
    }
}

internal static class RobustColumns
{
    public static void Check(IReadOnlyList<ReadOnlyMemory<float>> vectors, ReadOnlySpan<double> weights, Span<float> result, string rule)
    {
        ArgumentNullException.ThrowIfNull(vectors);
        if (vectors.Count == 0 || weights.Length != vectors.Count)
        {
            throw new ArgumentException($"{rule} needs at least one vector and one weight per vector.");
        }
        foreach (double w in weights)
        {
            if (!(w >= 0) || !double.IsFinite(w))
            {
                throw new ArgumentException($"{rule} weights must be finite and non-negative, got {w}.", nameof(weights));
            }
        }
        for (int k = 0; k < vectors.Count; k++)
        {
            ReadOnlySpan<float> v = vectors[k].Span;
            if (v.Length != result.Length)
            {
                throw new ArgumentException($"Upload {k} carries {v.Length} parameters; {result.Length} expected.", nameof(vectors));
            }
            for (int i = 0; i < v.Length; i++)
            {
                if (!float.IsFinite(v[i]))
                {
                    throw new ArgumentException($"Upload {k} parameter {i} is not finite.", nameof(vectors));
                }
            }
        }
    }

    public static Span<float> Buffer(ref float[] buffer, int count)
    {
        if (buffer.Length < count)
        {
            buffer = new float[count];
        }
        return buffer.AsSpan(0, count);
    }

    public static void Gather(IReadOnlyList<ReadOnlyMemory<float>> vectors, int index, Span<float> column)
    {
        for (int k = 0; k < column.Length; k++)
        {
            column[k] = vectors[k].Span[index];
        }
    }
}

/// <summary>The averaging rules by name, for options such as <c>--averaging fedavg|median|trimmed-mean</c>.</summary>
public static class UploadAggregators
{
    /// <summary>Default β of the trimmed mean: 10 % from each end.</summary>
    public const double DefaultTrimFraction = 0.1;

    /// <summary>Known rule names.</summary>
    public static IReadOnlyList<string> Names { get; } = ["fedavg", CoordinateMedianAggregator.RuleName, TrimmedMeanAggregator.RuleName];

    /// <summary>Creates a rule by name.</summary>
    /// <param name="name">"fedavg", "median" or "trimmed-mean".</param>
    /// <param name="trimFraction">β of the trimmed mean.</param>
    /// <returns>A new rule instance (each owns its buffers).</returns>
    /// <exception cref="ArgumentException">Unknown name (the message lists the known ones).</exception>
    public static IUploadAggregator Create(string name, double trimFraction = DefaultTrimFraction) => name switch
    {
        "fedavg" => new FedAvgAggregator(),
        CoordinateMedianAggregator.RuleName => new CoordinateMedianAggregator(),
        TrimmedMeanAggregator.RuleName => new TrimmedMeanAggregator(trimFraction),
        _ => throw new ArgumentException($"unknown averaging rule '{name}'; known: {string.Join(", ", Names)}", nameof(name)),
    };
}
