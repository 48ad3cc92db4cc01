using FedGrid.Learning.Randomness;

namespace FedGrid.Learning.Networks;

/// <summary>
/// A small dense float32 network with hand-written forward and backward passes on spans. The first hidden
/// layer is split by input block (one block per household), so that household m can compute its partial
/// sums a_m = W_m x_m alone, receive the sum of the other blocks' partial sums, add it like a bias and run the
/// rest of the network (<see cref="PartialSums"/>, <see cref="ForwardSplit"/>).
/// </summary>
/// <remarks>
/// <para>Parameters live in one flat vector (<see cref="Parameters"/>) whose layout is stable and documented:</para>
/// <list type="number">
/// <item>First hidden layer (H₁ neurons): for each input block m in order, the block's weight matrix W_m as H₁ rows of
/// n_m floats (row o holds neuron o's weights on that block's features); then the first-layer bias, H₁ floats.</item>
/// <item>Each later layer l (hidden layers, then the linear output layer) with n_in inputs and n_out neurons:
/// its weight matrix as n_out rows of n_in floats, then its bias, n_out floats.</item>
/// </list>
/// <para>Gradients use the same layout. A block's columns are contiguous, so the federated layer can keep
/// W_m private or average only the shared part with <see cref="FirstLayerBlockRange"/> and
/// <see cref="SharedRange"/>.</para>
/// </remarks>
public sealed class DenseNetwork
{
    private readonly float[] _parameters;
    private readonly int[] _blockInputOffset;
    private readonly int[] _blockWeightOffset;
    private readonly int[] _layerIn;
    private readonly int[] _layerOut;
    private readonly int[] _weightOffset;
    private readonly int[] _biasOffset;

    /// <summary>Creates a network with all parameters zero; call <see cref="Initialise"/> or <see cref="LoadParameters"/>.</summary>
    /// <param name="shape">The network's shape.</param>
    public DenseNetwork(NetworkShape shape)
    {
        ArgumentNullException.ThrowIfNull(shape);
        Shape = shape;
        int blocks = shape.BlockCount;
        int h1 = shape.FirstLayerSize;
        _blockInputOffset = new int[blocks];
        _blockWeightOffset = new int[blocks];
        int offset = 0, input = 0;
        for (int m = 0; m < blocks; m++)
        {
            _blockInputOffset[m] = input;
            _blockWeightOffset[m] = offset;
            input += shape.InputBlocks[m];
            offset += h1 * shape.InputBlocks[m];
        }
        int layers = shape.HiddenSizes.Count + 1;
        _layerIn = new int[layers];
        _layerOut = new int[layers];
        _weightOffset = new int[layers];
        _biasOffset = new int[layers];
        _layerIn[0] = shape.InputSize;
        _layerOut[0] = h1;
        _weightOffset[0] = 0;
        _biasOffset[0] = offset;
        offset += h1;
        for (int l = 1; l < layers; l++)
        {
            _layerIn[l] = _layerOut[l - 1];
            _layerOut[l] = l < shape.HiddenSizes.Count ? shape.HiddenSizes[l] : shape.OutputSize;
            _weightOffset[l] = offset;
            offset += _layerIn[l] * _layerOut[l];
            _biasOffset[l] = offset;
            offset += _layerOut[l];
        }
        _parameters = new float[offset];
    }

    /// <summary>The network's shape.</summary>
    public NetworkShape Shape { get; }

    /// <summary>Number of parameters (length of the flat parameter and gradient vectors).</summary>
    public int ParameterCount => _parameters.Length;

    /// <summary>Number of layers with weights: hidden layers plus the output layer.</summary>
    public int LayerCount => _layerIn.Length;

    /// <summary>The flat parameter vector in the documented layout; writable in place (e.g. by an optimiser).</summary>
    public Span<float> Parameters => _parameters;

    /// <summary>Offset and length, in the flat vector, of block m's first-layer weights W_m (H₁ × n_m, row-major).</summary>
    /// <param name="block">Block index.</param>
    /// <returns>The range.</returns>
    public (int Offset, int Length) FirstLayerBlockRange(int block)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(block);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(block, Shape.BlockCount);
        return (_blockWeightOffset[block], Shape.FirstLayerSize * Shape.InputBlocks[block]);
    }

    /// <summary>Offset and length of everything after the first layer's block weights: the first-layer bias and all later layers.</summary>
    /// <returns>The range.</returns>
    public (int Offset, int Length) SharedRange() => (_biasOffset[0], _parameters.Length - _biasOffset[0]);

    /// <summary>Offset of layer <paramref name="layer"/>'s weights in the flat vector (layer 0 is the first hidden layer; its weights are block by block).</summary>
    /// <param name="layer">Layer index, 0 … <see cref="LayerCount"/> − 1.</param>
    /// <returns>The offset.</returns>
    public int WeightOffset(int layer) => _weightOffset[layer];

    /// <summary>Offset of layer <paramref name="layer"/>'s bias in the flat vector.</summary>
    /// <param name="layer">Layer index.</param>
    /// <returns>The offset.</returns>
    public int BiasOffset(int layer) => _biasOffset[layer];

    /// <summary>Input width of layer <paramref name="layer"/>.</summary>
    /// <param name="layer">Layer index.</param>
    /// <returns>The width.</returns>
    public int LayerInputSize(int layer) => _layerIn[layer];

    /// <summary>Neuron count of layer <paramref name="layer"/>.</summary>
    /// <param name="layer">Layer index.</param>
    /// <returns>The count.</returns>
    public int LayerOutputSize(int layer) => _layerOut[layer];

    /// <summary>Creates buffers for forward and backward passes of this network.</summary>
    /// <returns>A new workspace (allocates once).</returns>
    public NetworkWorkspace CreateWorkspace() => new(Shape);

    /// <summary>
    /// Seeded initialisation: weights uniform in ±√(6/(n_in+n_out)) (Glorot &amp; Bengio 2010) for tanh layers and
    /// ±√(6/n_in) (He et al. 2015) for ReLU layers; the output layer's weights are further multiplied by
    /// <paramref name="outputScale"/>; biases zero. The same seed gives the same parameters.
    /// </summary>
    /// <param name="seed">Seed.</param>
    /// <param name="outputScale">Factor on the output layer's initial weights (small values start a policy near its mean).</param>
    public void Initialise(ulong seed, float outputScale = 1f)
    {
        var rng = new LearningRandom(seed);
        Array.Clear(_parameters);
        for (int l = 0; l < LayerCount; l++)
        {
            int nIn = _layerIn[l], nOut = _layerOut[l];
            double limit = Shape.HiddenActivation == Activation.Relu && l < LayerCount - 1
                ? Math.Sqrt(6.0 / nIn)
                : Math.Sqrt(6.0 / (nIn + nOut));
            if (l == LayerCount - 1)
            {
                limit *= outputScale;
            }
            int count = nIn * nOut;
            for (int i = 0; i < count; i++)
            {
                _parameters[_weightOffset[l] + i] = (float)((2.0 * rng.NextDouble() - 1.0) * limit);
            }
        }
    }

    /// <summary>Copies a flat parameter vector (documented layout) into the network.</summary>
    /// <param name="parameters">Exactly <see cref="ParameterCount"/> floats.</param>
    public void LoadParameters(ReadOnlySpan<float> parameters)
    {
        if (parameters.Length != _parameters.Length)
        {
            throw new ArgumentException($"Expected {_parameters.Length} parameters, got {parameters.Length}.", nameof(parameters));
        }
        parameters.CopyTo(_parameters);
    }

    /// <summary>Copies the network's parameters into a flat vector (documented layout).</summary>
    /// <param name="destination">At least <see cref="ParameterCount"/> floats.</param>
    public void SaveParameters(Span<float> destination)
    {
        if (destination.Length < _parameters.Length)
        {
            throw new ArgumentException($"Destination holds {destination.Length} floats; {_parameters.Length} needed.", nameof(destination));
        }
        _parameters.CopyTo(destination);
    }

    /// <summary>Partial sums of one input block: a_m[o] = Σ_i W_m[o, i] · x_m[i], one number per first-layer neuron, no bias.</summary>
    /// <param name="block">Block index m.</param>
    /// <param name="blockInput">The block's features x_m (length n_m).</param>
    /// <param name="partialSums">Receives a_m (length H₁).</param>
    public void PartialSums(int block, ReadOnlySpan<float> blockInput, Span<float> partialSums)
    {
        CheckBlock(block, blockInput);
        int h1 = Shape.FirstLayerSize;
        if (partialSums.Length != h1)
        {
            throw new ArgumentException($"Partial sums need {h1} floats, got {partialSums.Length}.", nameof(partialSums));
        }
        int n = Shape.InputBlocks[block];
        ReadOnlySpan<float> w = _parameters.AsSpan(_blockWeightOffset[block], h1 * n);
        for (int o = 0; o < h1; o++)
        {
            partialSums[o] = Kernels.Dot(w.Slice(o * n, n), blockInput);
        }
    }

    /// <summary>Full forward pass on the concatenated input; the result is in <paramref name="output"/> and the workspace.</summary>
    /// <param name="input">Concatenated input of every block (length <see cref="NetworkShape.InputSize"/>).</param>
    /// <param name="workspace">Buffers for this network, remembered for <see cref="Backward(NetworkWorkspace, ReadOnlySpan{float}, Span{float})"/>.</param>
    /// <param name="output">Receives the linear outputs (length <see cref="NetworkShape.OutputSize"/>).</param>
    public void Forward(ReadOnlySpan<float> input, NetworkWorkspace workspace, Span<float> output)
    {
        CheckWorkspace(workspace);
        if (input.Length != Shape.InputSize)
        {
            throw new ArgumentException($"Input needs {Shape.InputSize} floats, got {input.Length}.", nameof(input));
        }
        input.CopyTo(workspace.Input);
        int h1 = Shape.FirstLayerSize;
        Span<float> z0 = workspace.PreActivation[0];
        _parameters.AsSpan(_biasOffset[0], h1).CopyTo(z0);
        for (int m = 0; m < Shape.BlockCount; m++)
        {
            int n = Shape.InputBlocks[m];
            ReadOnlySpan<float> x = input.Slice(_blockInputOffset[m], n);
            ReadOnlySpan<float> w = _parameters.AsSpan(_blockWeightOffset[m], h1 * n);
            for (int o = 0; o < h1; o++)
            {
                z0[o] += Kernels.Dot(w.Slice(o * n, n), x);
            }
        }
        workspace.SplitBlock = -1;
        FinishForward(workspace, output);
    }

    /// <summary>
    /// Split forward pass for household m: first-layer pre-activation = W_m x_m + <paramref name="otherPartialSums"/> + b₁,
    /// where <paramref name="otherPartialSums"/> is Σ_{k≠m} a_k as returned by the coordinator; then the rest of the network.
    /// Equals <see cref="Forward"/> on the full input up to float rounding.
    /// </summary>
    /// <param name="block">The household's block m.</param>
    /// <param name="blockInput">x_m (length n_m).</param>
    /// <param name="otherPartialSums">Σ_{k≠m} W_k x_k (length H₁).</param>
    /// <param name="workspace">Buffers, remembered for <see cref="Backward(NetworkWorkspace, ReadOnlySpan{float}, Span{float})"/>.</param>
    /// <param name="output">Receives the outputs.</param>
    public void ForwardSplit(int block, ReadOnlySpan<float> blockInput, ReadOnlySpan<float> otherPartialSums, NetworkWorkspace workspace, Span<float> output)
    {
        CheckWorkspace(workspace);
        CheckBlock(block, blockInput);
        int h1 = Shape.FirstLayerSize;
        if (otherPartialSums.Length != h1)
        {
            throw new ArgumentException($"Partial sums need {h1} floats, got {otherPartialSums.Length}.", nameof(otherPartialSums));
        }
        blockInput.CopyTo(workspace.Input.AsSpan(_blockInputOffset[block]));
        Span<float> z0 = workspace.PreActivation[0];
        PartialSums(block, blockInput, z0);
        ReadOnlySpan<float> b = _parameters.AsSpan(_biasOffset[0], h1);
        for (int o = 0; o < h1; o++)
        {
            z0[o] += otherPartialSums[o] + b[o];
        }
        workspace.SplitBlock = block;
        FinishForward(workspace, output);
    }

    /// <summary>
    /// Backward pass after the last forward pass in <paramref name="workspace"/>: ADDS the gradient of the loss with
    /// respect to every parameter to <paramref name="gradient"/> (same flat layout; zero it first for a fresh gradient).
    /// After a split forward pass only block m's first-layer columns (and every later parameter) receive gradient;
    /// the gradient with respect to the other blocks' partial sums is left in <see cref="NetworkWorkspace.FirstLayerDelta"/>.
    /// </summary>
    /// <param name="workspace">Workspace holding the forward pass.</param>
    /// <param name="outputGradient">∂loss/∂output (length <see cref="NetworkShape.OutputSize"/>).</param>
    /// <param name="gradient">Flat gradient accumulator (length <see cref="ParameterCount"/>).</param>
    public void Backward(NetworkWorkspace workspace, ReadOnlySpan<float> outputGradient, Span<float> gradient) =>
        Backward(workspace, outputGradient, gradient, []);

    /// <summary>
    /// Backward pass as <see cref="Backward(NetworkWorkspace, ReadOnlySpan{float}, Span{float})"/> that also writes
    /// ∂loss/∂input (overwritten, not added): the whole input after a full forward pass, or only x_m (length n_m)
    /// after a split one. Pass an empty span to skip it.
    /// </summary>
    /// <param name="workspace">Workspace holding the forward pass.</param>
    /// <param name="outputGradient">∂loss/∂output.</param>
    /// <param name="gradient">Flat gradient accumulator.</param>
    /// <param name="inputGradient">Receives ∂loss/∂input, or empty.</param>
    public void Backward(NetworkWorkspace workspace, ReadOnlySpan<float> outputGradient, Span<float> gradient, Span<float> inputGradient)
    {
        CheckWorkspace(workspace);
        if (!workspace.HasForward)
        {
            throw new InvalidOperationException("Backward needs a forward pass first.");
        }
        if (outputGradient.Length != Shape.OutputSize)
        {
            throw new ArgumentException($"Output gradient needs {Shape.OutputSize} floats, got {outputGradient.Length}.", nameof(outputGradient));
        }
        if (gradient.Length != _parameters.Length)
        {
            throw new ArgumentException($"Gradient needs {_parameters.Length} floats, got {gradient.Length}.", nameof(gradient));
        }
        int split = workspace.SplitBlock;
        int expectedInputGrad = split < 0 ? Shape.InputSize : Shape.InputBlocks[split];
        if (inputGradient.Length != 0 && inputGradient.Length != expectedInputGrad)
        {
            throw new ArgumentException($"Input gradient needs {expectedInputGrad} floats, got {inputGradient.Length}.", nameof(inputGradient));
        }

        float[] deltaBuffer = workspace.DeltaA, spareBuffer = workspace.DeltaB;
        Span<float> delta = deltaBuffer.AsSpan(0, Shape.OutputSize);
        outputGradient.CopyTo(delta);
        for (int l = LayerCount - 1; l >= 1; l--)
        {
            int nIn = _layerIn[l], nOut = _layerOut[l];
            ReadOnlySpan<float> aPrev = workspace.Activations[l - 1];
            Span<float> gw = gradient.Slice(_weightOffset[l], nIn * nOut);
            Span<float> gb = gradient.Slice(_biasOffset[l], nOut);
            ReadOnlySpan<float> w = _parameters.AsSpan(_weightOffset[l], nIn * nOut);
            Span<float> prev = spareBuffer.AsSpan(0, nIn);
            prev.Clear();
            for (int o = 0; o < nOut; o++)
            {
                float d = delta[o];
                gb[o] += d;
                if (d != 0f)
                {
                    Kernels.Axpy(d, aPrev, gw.Slice(o * nIn, nIn));
                    Kernels.Axpy(d, w.Slice(o * nIn, nIn), prev);
                }
            }
            ApplyActivationDerivative(workspace.PreActivation[l - 1], aPrev, prev);
            (deltaBuffer, spareBuffer) = (spareBuffer, deltaBuffer);
            delta = prev;
        }

        int h1 = Shape.FirstLayerSize;
        delta[..h1].CopyTo(workspace.FirstDelta);
        Span<float> gb0 = gradient.Slice(_biasOffset[0], h1);
        for (int o = 0; o < h1; o++)
        {
            gb0[o] += delta[o];
        }
        int first = split < 0 ? 0 : split;
        int last = split < 0 ? Shape.BlockCount - 1 : split;
        if (inputGradient.Length != 0)
        {
            inputGradient.Clear();
        }
        for (int m = first; m <= last; m++)
        {
            int n = Shape.InputBlocks[m];
            ReadOnlySpan<float> x = workspace.Input.AsSpan(_blockInputOffset[m], n);
            Span<float> gw = gradient.Slice(_blockWeightOffset[m], h1 * n);
            ReadOnlySpan<float> w = _parameters.AsSpan(_blockWeightOffset[m], h1 * n);
            Span<float> gx = inputGradient.Length == 0 ? [] : inputGradient.Slice(split < 0 ? _blockInputOffset[m] : 0, n);
            for (int o = 0; o < h1; o++)
            {
                float d = delta[o];
                if (d == 0f)
                {
                    continue;
                }
                Kernels.Axpy(d, x, gw.Slice(o * n, n));
                if (gx.Length != 0)
                {
                    Kernels.Axpy(d, w.Slice(o * n, n), gx);
                }
            }
        }
    }

    private void FinishForward(NetworkWorkspace workspace, Span<float> output)
    {
        if (output.Length != Shape.OutputSize)
        {
            throw new ArgumentException($"Output needs {Shape.OutputSize} floats, got {output.Length}.", nameof(output));
        }
        Activate(workspace.PreActivation[0], workspace.Activations[0], LayerCount > 1);
        for (int l = 1; l < LayerCount; l++)
        {
            int nIn = _layerIn[l], nOut = _layerOut[l];
            ReadOnlySpan<float> a = workspace.Activations[l - 1];
            Span<float> z = workspace.PreActivation[l];
            ReadOnlySpan<float> w = _parameters.AsSpan(_weightOffset[l], nIn * nOut);
            ReadOnlySpan<float> b = _parameters.AsSpan(_biasOffset[l], nOut);
            for (int o = 0; o < nOut; o++)
            {
                z[o] = Kernels.Dot(w.Slice(o * nIn, nIn), a) + b[o];
            }
            Activate(z, workspace.Activations[l], l < LayerCount - 1);
        }
        workspace.Activations[^1].CopyTo(output);
        workspace.HasForward = true;
    }

    private void Activate(ReadOnlySpan<float> z, Span<float> a, bool hidden)
    {
        if (!hidden)
        {
            z.CopyTo(a);
            return;
        }
        if (Shape.HiddenActivation == Activation.Tanh)
        {
            for (int i = 0; i < z.Length; i++)
            {
                a[i] = MathF.Tanh(z[i]);
            }
        }
        else
        {
            for (int i = 0; i < z.Length; i++)
            {
                a[i] = z[i] > 0f ? z[i] : 0f;
            }
        }
    }

    private void ApplyActivationDerivative(ReadOnlySpan<float> z, ReadOnlySpan<float> a, Span<float> delta)
    {
        if (Shape.HiddenActivation == Activation.Tanh)
        {
            for (int i = 0; i < delta.Length; i++)
            {
                delta[i] *= 1f - a[i] * a[i];
            }
        }
        else
        {
            for (int i = 0; i < delta.Length; i++)
            {
                if (z[i] <= 0f)
                {
                    delta[i] = 0f;
                }
            }
        }
    }

    private void CheckBlock(int block, ReadOnlySpan<float> blockInput)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(block);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(block, Shape.BlockCount);
        if (blockInput.Length != Shape.InputBlocks[block])
        {
            throw new ArgumentException($"Block {block} has {Shape.InputBlocks[block]} features, got {blockInput.Length}.", nameof(blockInput));
        }
    }

    private void CheckWorkspace(NetworkWorkspace workspace)
    {
        ArgumentNullException.ThrowIfNull(workspace);
        if (!ReferenceEquals(workspace.Shape, Shape))
        {
            throw new ArgumentException("The workspace was created for another network shape.", nameof(workspace));
        }
    }
}
