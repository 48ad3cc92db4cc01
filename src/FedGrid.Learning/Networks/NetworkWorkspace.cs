namespace FedGrid.Learning.Networks;

/// <summary>
/// Caller-owned buffers for one forward and backward pass of a <see cref="DenseNetwork"/>: the input copy,
/// each layer's pre-activation and activation, and the backward deltas. Create it once (it allocates) and reuse
/// it; the passes then allocate nothing. A workspace holds the state of the last forward pass, which the
/// next backward pass consumes.
/// </summary>
public sealed class NetworkWorkspace
{
    internal NetworkWorkspace(NetworkShape shape)
    {
        Shape = shape;
        Input = new float[shape.InputSize];
        int layers = shape.HiddenSizes.Count + 1;
        PreActivation = new float[layers][];
        Activations = new float[layers][];
        int widest = shape.InputSize;
        for (int l = 0; l < layers; l++)
        {
            int size = l < shape.HiddenSizes.Count ? shape.HiddenSizes[l] : shape.OutputSize;
            PreActivation[l] = new float[size];
            Activations[l] = new float[size];
            widest = Math.Max(widest, size);
        }
        DeltaA = new float[widest];
        DeltaB = new float[widest];
        FirstDelta = new float[shape.FirstLayerSize];
    }

    /// <summary>The shape this workspace fits.</summary>
    public NetworkShape Shape { get; }

    internal float[] Input { get; }

    internal float[][] PreActivation { get; }

    internal float[][] Activations { get; }

    internal float[] DeltaA { get; }

    internal float[] DeltaB { get; }

    internal float[] FirstDelta { get; }

    /// <summary>Block used by the last split forward pass, or −1 after a full forward pass.</summary>
    public int SplitBlock { get; internal set; } = -1;

    /// <summary>True once a forward pass has run.</summary>
    public bool HasForward { get; internal set; }

    /// <summary>Outputs of the last forward pass.</summary>
    public ReadOnlySpan<float> Output => Activations[^1];

    /// <summary>
    /// Gradient of the loss with respect to the first layer's pre-activation, set by the last backward pass.
    /// It is also the gradient with respect to the externally supplied partial sums of the other blocks.
    /// </summary>
    public ReadOnlySpan<float> FirstLayerDelta => FirstDelta;
}
