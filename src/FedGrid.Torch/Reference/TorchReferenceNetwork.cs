using FedGrid.Learning.Networks;
using TorchSharp;
using static TorchSharp.torch;

namespace FedGrid.Torch.Reference;

/// <summary>
/// A TorchSharp twin of a <see cref="DenseNetwork"/>: the same shape and the same weights, copied from the flat
/// parameter vector, as leaf tensors with autograd. It is the reference the hand-written backward passes are tested
/// against; by default it computes in float64 so that the reference's own rounding is negligible.
/// </summary>
public sealed class TorchReferenceNetwork : IDisposable
{
    private readonly NetworkShape _shape;
    private readonly Tensor[] _blockWeights;
    private readonly Tensor[] _weights;
    private readonly Tensor[] _biases;
    private readonly int[] _blockInputOffset;
    private readonly ScalarType _type;

    /// <summary>Builds the twin of a network.</summary>
    /// <param name="network">The network whose shape and current parameters are copied.</param>
    /// <param name="type">Element type of the twin (Float64 or Float32).</param>
    public TorchReferenceNetwork(DenseNetwork network, ScalarType type = ScalarType.Float64)
    {
        ArgumentNullException.ThrowIfNull(network);
        _shape = network.Shape;
        _type = type;
        ReadOnlySpan<float> p = network.Parameters;
        int h1 = _shape.FirstLayerSize;
        _blockWeights = new Tensor[_shape.BlockCount];
        _blockInputOffset = new int[_shape.BlockCount];
        int input = 0;
        for (int m = 0; m < _shape.BlockCount; m++)
        {
            (int offset, int length) = network.FirstLayerBlockRange(m);
            _blockWeights[m] = Leaf(p.Slice(offset, length), h1, _shape.InputBlocks[m]);
            _blockInputOffset[m] = input;
            input += _shape.InputBlocks[m];
        }
        _weights = new Tensor[network.LayerCount];
        _biases = new Tensor[network.LayerCount];
        _biases[0] = Leaf(p.Slice(network.BiasOffset(0), h1), h1);
        for (int l = 1; l < network.LayerCount; l++)
        {
            int nIn = network.LayerInputSize(l), nOut = network.LayerOutputSize(l);
            _weights[l] = Leaf(p.Slice(network.WeightOffset(l), nIn * nOut), nOut, nIn);
            _biases[l] = Leaf(p.Slice(network.BiasOffset(l), nOut), nOut);
        }
        Layout = network;
    }

    /// <summary>The network whose layout the flat gradients follow.</summary>
    public DenseNetwork Layout { get; }

    /// <summary>A tensor of this twin's element type from floats, shaped [rows, columns] (columns 0: a vector).</summary>
    /// <param name="values">Values, row-major.</param>
    /// <param name="rows">Rows (or vector length).</param>
    /// <param name="columns">Columns, or 0 for a vector.</param>
    /// <param name="requiresGrad">Whether autograd tracks it.</param>
    /// <returns>The tensor.</returns>
    public Tensor Tensor(ReadOnlySpan<float> values, long rows, long columns = 0, bool requiresGrad = false)
    {
        double[] data = new double[values.Length];
        for (int i = 0; i < data.Length; i++)
        {
            data[i] = values[i];
        }
        long[] dims = columns == 0 ? [rows] : [rows, columns];
        Tensor t = torch.tensor(data, dims, ScalarType.Float64).to_type(_type);
        return requiresGrad ? t.requires_grad_() : t;
    }

    /// <summary>Forward pass on a batch of concatenated inputs [batch, InputSize]; returns [batch, OutputSize].</summary>
    /// <param name="input">The inputs.</param>
    /// <returns>The outputs.</returns>
    public Tensor Forward(Tensor input)
    {
        Tensor z = _biases[0].expand(input.shape[0], _shape.FirstLayerSize);
        for (int m = 0; m < _shape.BlockCount; m++)
        {
            Tensor x = input.narrow(1, _blockInputOffset[m], _shape.InputBlocks[m]);
            z = z + x.matmul(_blockWeights[m].t());
        }
        return Rest(z);
    }

    /// <summary>Partial sums W_m x_m of a batch of block inputs [batch, n_m]; returns [batch, H₁].</summary>
    /// <param name="block">Block m.</param>
    /// <param name="blockInput">x_m.</param>
    /// <returns>a_m.</returns>
    public Tensor PartialSums(int block, Tensor blockInput) => blockInput.matmul(_blockWeights[block].t());

    /// <summary>Split forward pass: W_m x_m + others + b₁, then the rest of the network.</summary>
    /// <param name="block">Block m.</param>
    /// <param name="blockInput">x_m [batch, n_m].</param>
    /// <param name="otherPartialSums">Σ_{k≠m} a_k [batch, H₁].</param>
    /// <returns>The outputs.</returns>
    public Tensor ForwardSplit(int block, Tensor blockInput, Tensor otherPartialSums) =>
        Rest(PartialSums(block, blockInput) + otherPartialSums + _biases[0]);

    /// <summary>The accumulated autograd gradient of every parameter in the flat layout of <see cref="Layout"/> (zero where none).</summary>
    /// <returns>A new flat vector of doubles.</returns>
    public double[] FlatGradient()
    {
        DenseNetwork n = Layout;
        double[] g = new double[n.ParameterCount];
        for (int m = 0; m < _shape.BlockCount; m++)
        {
            Put(g, n.FirstLayerBlockRange(m).Offset, _blockWeights[m]);
        }
        Put(g, n.BiasOffset(0), _biases[0]);
        for (int l = 1; l < n.LayerCount; l++)
        {
            Put(g, n.WeightOffset(l), _weights[l]);
            Put(g, n.BiasOffset(l), _biases[l]);
        }
        return g;
    }

    /// <summary>Clears the accumulated gradients.</summary>
    public void ZeroGrad()
    {
        foreach (Tensor t in AllParameters())
        {
            t.grad?.zero_();
        }
    }

    /// <summary>Values of a tensor as doubles (row-major).</summary>
    /// <param name="t">Tensor.</param>
    /// <returns>The values.</returns>
    public static double[] Values(Tensor t)
    {
        ArgumentNullException.ThrowIfNull(t);
        return t.detach().cpu().to_type(ScalarType.Float64).contiguous().data<double>().ToArray();
    }

    /// <inheritdoc />
    public void Dispose()
    {
        foreach (Tensor t in AllParameters())
        {
            t.Dispose();
        }
    }

    private IEnumerable<Tensor> AllParameters()
    {
        foreach (Tensor t in _blockWeights)
        {
            yield return t;
        }
        for (int l = 0; l < _weights.Length; l++)
        {
            if (_weights[l] is { } w)
            {
                yield return w;
            }
            yield return _biases[l];
        }
    }

    private Tensor Rest(Tensor z)
    {
        Tensor a = Activate(z);
        int layers = _weights.Length;
        for (int l = 1; l < layers; l++)
        {
            z = a.matmul(_weights[l].t()) + _biases[l];
            a = l < layers - 1 ? Activate(z) : z;
        }
        return a;
    }

    private Tensor Activate(Tensor z) => _shape.HiddenActivation == Activation.Tanh ? z.tanh() : z.relu();

    private Tensor Leaf(ReadOnlySpan<float> values, long rows, long columns = 0) => Tensor(values, rows, columns, requiresGrad: true);

    private static void Put(double[] g, int offset, Tensor parameter)
    {
        Tensor? grad = parameter.grad;
        if (grad is null)
        {
            return;
        }
        double[] v = Values(grad);
        Array.Copy(v, 0, g, offset, v.Length);
    }
}
