namespace FedGrid.Learning.Networks;

/// <summary>
/// Shape of a dense network: the input is the concatenation of blocks (one per household; block m has
/// <c>InputBlocks[m]</c> features), followed by one or more hidden layers and a linear output layer.
/// </summary>
public sealed class NetworkShape
{
    private readonly int[] _inputBlocks;
    private readonly int[] _hidden;

    /// <summary>Creates a shape.</summary>
    /// <param name="inputBlocks">Feature count of each input block, in input order; each at least 1.</param>
    /// <param name="hiddenSizes">Neuron count of each hidden layer (at least one layer; the first one is the split layer).</param>
    /// <param name="outputSize">Number of linear outputs, at least 1.</param>
    /// <param name="hiddenActivation">Activation of every hidden layer.</param>
    public NetworkShape(IReadOnlyList<int> inputBlocks, IReadOnlyList<int> hiddenSizes, int outputSize, Activation hiddenActivation)
    {
        ArgumentNullException.ThrowIfNull(inputBlocks);
        ArgumentNullException.ThrowIfNull(hiddenSizes);
        if (inputBlocks.Count == 0)
        {
            throw new ArgumentException("A network needs at least one input block.", nameof(inputBlocks));
        }
        if (hiddenSizes.Count == 0)
        {
            throw new ArgumentException("A network needs at least one hidden layer (the split first layer).", nameof(hiddenSizes));
        }
        foreach (int b in inputBlocks)
        {
            if (b < 1)
            {
                throw new ArgumentException($"Input block sizes must be at least 1 (got {b}).", nameof(inputBlocks));
            }
        }
        foreach (int h in hiddenSizes)
        {
            if (h < 1)
            {
                throw new ArgumentException($"Hidden layer sizes must be at least 1 (got {h}).", nameof(hiddenSizes));
            }
        }
        ArgumentOutOfRangeException.ThrowIfLessThan(outputSize, 1);
        if (!Enum.IsDefined(hiddenActivation))
        {
            throw new ArgumentOutOfRangeException(nameof(hiddenActivation));
        }
        _inputBlocks = [.. inputBlocks];
        _hidden = [.. hiddenSizes];
        OutputSize = outputSize;
        HiddenActivation = hiddenActivation;
        InputSize = _inputBlocks.Sum();
    }

    /// <summary>A shape with <paramref name="blockCount"/> equal input blocks of <paramref name="blockSize"/> features.</summary>
    /// <param name="blockCount">Number of blocks (households).</param>
    /// <param name="blockSize">Features per block.</param>
    /// <param name="hiddenSizes">Hidden layer sizes.</param>
    /// <param name="outputSize">Output count.</param>
    /// <param name="hiddenActivation">Hidden activation.</param>
    /// <returns>The shape.</returns>
    public static NetworkShape Uniform(int blockCount, int blockSize, IReadOnlyList<int> hiddenSizes, int outputSize, Activation hiddenActivation)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(blockCount, 1);
        return new NetworkShape(Enumerable.Repeat(blockSize, blockCount).ToArray(), hiddenSizes, outputSize, hiddenActivation);
    }

    /// <summary>Feature count of each input block.</summary>
    public IReadOnlyList<int> InputBlocks => _inputBlocks;

    /// <summary>Neuron count of each hidden layer; <c>HiddenSizes[0]</c> is the split first layer.</summary>
    public IReadOnlyList<int> HiddenSizes => _hidden;

    /// <summary>Number of linear outputs.</summary>
    public int OutputSize { get; }

    /// <summary>Activation of the hidden layers.</summary>
    public Activation HiddenActivation { get; }

    /// <summary>Total input width, the sum of the block sizes.</summary>
    public int InputSize { get; }

    /// <summary>Number of input blocks.</summary>
    public int BlockCount => _inputBlocks.Length;

    /// <summary>Width of the first hidden layer, i.e. the length of one block's partial sums.</summary>
    public int FirstLayerSize => _hidden[0];
}
