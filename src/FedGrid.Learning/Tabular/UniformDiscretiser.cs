namespace FedGrid.Learning.Tabular;

/// <summary>
/// Maps a real state vector to one discrete state index: dimension d is cut into Bins[d] equal cells over
/// [Lower[d], Upper[d]] (values outside fall in the end cells), and the cells combine in mixed radix with
/// dimension 0 the least significant digit.
/// </summary>
public sealed class UniformDiscretiser
{
    private readonly float[] _lower;
    private readonly float[] _upper;
    private readonly int[] _bins;

    /// <summary>Creates a discretiser.</summary>
    /// <param name="lower">Lower end of each dimension.</param>
    /// <param name="upper">Upper end of each dimension (&gt; lower).</param>
    /// <param name="bins">Cells per dimension (≥ 1).</param>
    public UniformDiscretiser(ReadOnlySpan<float> lower, ReadOnlySpan<float> upper, ReadOnlySpan<int> bins)
    {
        if (lower.Length == 0 || upper.Length != lower.Length || bins.Length != lower.Length)
        {
            throw new ArgumentException("Lower, upper and bins need the same, non-zero length.");
        }
        long count = 1;
        for (int d = 0; d < lower.Length; d++)
        {
            if (!(upper[d] > lower[d]))
            {
                throw new ArgumentException($"Dimension {d}: upper ({upper[d]}) must exceed lower ({lower[d]}).");
            }
            if (bins[d] < 1)
            {
                throw new ArgumentException($"Dimension {d}: at least one bin is needed.");
            }
            count *= bins[d];
            if (count > int.MaxValue)
            {
                throw new ArgumentException("Too many discrete states for one table.");
            }
        }
        _lower = lower.ToArray();
        _upper = upper.ToArray();
        _bins = bins.ToArray();
        StateCount = (int)count;
    }

    /// <summary>Number of dimensions.</summary>
    public int Dimensions => _bins.Length;

    /// <summary>Number of discrete states, the product of the bin counts.</summary>
    public int StateCount { get; }

    /// <summary>The cell of one dimension's value.</summary>
    /// <param name="dimension">Dimension.</param>
    /// <param name="value">Value.</param>
    /// <returns>Cell in [0, Bins[d]).</returns>
    public int Cell(int dimension, float value)
    {
        int bins = _bins[dimension];
        float f = (value - _lower[dimension]) / (_upper[dimension] - _lower[dimension]);
        if (!(f > 0f))
        {
            return 0;
        }
        int c = (int)(f * bins);
        return c >= bins ? bins - 1 : c;
    }

    /// <summary>Discrete state index of <paramref name="state"/>.</summary>
    /// <param name="state">State vector of length <see cref="Dimensions"/>.</param>
    /// <returns>Index in [0, <see cref="StateCount"/>).</returns>
    public int Index(ReadOnlySpan<float> state)
    {
        if (state.Length != _bins.Length)
        {
            throw new ArgumentException($"State needs {_bins.Length} values, got {state.Length}.", nameof(state));
        }
        int index = 0, radix = 1;
        for (int d = 0; d < _bins.Length; d++)
        {
            index += Cell(d, state[d]) * radix;
            radix *= _bins[d];
        }
        return index;
    }
}
