using FedGrid.Federation.Protocol;
using FedGrid.Learning.ActorCritic;
using FedGrid.Learning.Networks;
using FedGrid.Learning.Optimisation;
using FedGrid.Learning.Randomness;

namespace FedGrid.Federation.Households;

/// <summary>
/// One household's own transitions of a round, as the household stored them: its state block x_m, the other households'
/// summed partial sums of both networks as the coordinator returned them, its sampled pre-squash action, its box and
/// its observed cost. Row i is decision step i of the buffer; the last row waits for its successor (next round).
/// </summary>
public sealed class TransitionBuffer
{
    internal TransitionBuffer(int capacity, int features, int actorSums, int criticSums, int actions)
    {
        Capacity = capacity;
        Features = features;
        ActorSums = actorSums;
        CriticSums = criticSums;
        Actions = actions;
        State = new float[capacity * features];
        ActorOthers = new float[capacity * actorSums];
        CriticOthers = new float[capacity * criticSums];
        PreSquash = new float[capacity * actions];
        Lower = new float[capacity * actions];
        Upper = new float[capacity * actions];
        Cost = new float[capacity];
    }

    /// <summary>Rows the buffer holds at most.</summary>
    public int Capacity { get; }

    /// <summary>Rows in use.</summary>
    public int Count { get; internal set; }

    internal int Features { get; }

    internal int ActorSums { get; }

    internal int CriticSums { get; }

    internal int Actions { get; }

    internal float[] State { get; }

    internal float[] ActorOthers { get; }

    internal float[] CriticOthers { get; }

    internal float[] PreSquash { get; }

    internal float[] Lower { get; }

    internal float[] Upper { get; }

    internal float[] Cost { get; }

    internal Span<float> StateRow(int i) => State.AsSpan(i * Features, Features);

    internal Span<float> ActorOthersRow(int i) => ActorOthers.AsSpan(i * ActorSums, ActorSums);

    internal Span<float> CriticOthersRow(int i) => CriticOthers.AsSpan(i * CriticSums, CriticSums);

    internal Span<float> PreSquashRow(int i) => PreSquash.AsSpan(i * Actions, Actions);

    internal Span<float> LowerRow(int i) => Lower.AsSpan(i * Actions, Actions);

    internal Span<float> UpperRow(int i) => Upper.AsSpan(i * Actions, Actions);

    /// <summary>Keeps only the last row (moved to row 0): it waits for its successor in the next round.</summary>
    internal void KeepLast()
    {
        if (Count <= 1)
        {
            return;
        }
        int last = Count - 1;
        StateRow(last).CopyTo(StateRow(0));
        ActorOthersRow(last).CopyTo(ActorOthersRow(0));
        CriticOthersRow(last).CopyTo(CriticOthersRow(0));
        PreSquashRow(last).CopyTo(PreSquashRow(0));
        LowerRow(last).CopyTo(LowerRow(0));
        UpperRow(last).CopyTo(UpperRow(0));
        Cost[0] = Cost[last];
        Count = 1;
    }
}

/// <summary>
/// A household's local advantage actor-critic training on its own transitions (the rule of
/// <see cref="ActorCriticLearner"/>, restricted to what household m can compute): split forward passes with the stored
/// other-household sums, its own actor head and its own critic head only, n-step returns over windows of
/// <see cref="ActorCriticOptions.RolloutSteps"/> rows bootstrapped by its critic at the row after the window, gradients
/// clipped to <see cref="ActorCriticOptions.MaxGradientNorm"/>, one optimiser step per window. Row Count − 1 is only
/// a bootstrap (its successor is not known yet). Gradients reach W_m and the shared parameters only.
/// </summary>
public sealed class LocalTrainer
{
    private readonly int _m;
    private readonly ActorCriticOptions _learning;
    private readonly LocalTrainingOptions _local;
    private readonly DenseNetwork _actor, _critic;
    private readonly NetworkWorkspace _aw, _cw;
    private readonly IOptimiser _actorOpt, _criticOpt;
    private readonly float[] _actorGrad, _criticGrad, _actorOut, _actorOutGrad, _values, _valueGrad;
    private readonly float[] _returnBuffer;
    private readonly (int Offset, int Length)[] _actorRanges, _criticRanges;
    private Adam? _warmActorOpt, _warmCriticOpt;
    private int[] _warmOrder = [];
    private float[] _warmTargets = [];

    internal LocalTrainer(int household, DenseNetwork actor, DenseNetwork critic, ActorCriticOptions learning, LocalTrainingOptions local)
    {
        if (learning.GaeLambda != 1.0 || learning.UpdateEpochs != 1 || learning.ClipRatio != 0 || learning.NormaliseAdvantages)
            throw new NotSupportedException(
                "Local training on a household implements the plain advantage actor-critic update only; GaeLambda, UpdateEpochs, ClipRatio and NormaliseAdvantages must keep their defaults in a federated run.");
        _m = household;
        _learning = learning;
        _local = local;
        _actor = actor;
        _critic = critic;
        _aw = actor.CreateWorkspace();
        _cw = critic.CreateWorkspace();
        _actorOpt = local.Optimiser == LocalOptimiser.Adam
            ? new Adam(actor.ParameterCount, learning.ActorLearningRate)
            : new Sgd(actor.ParameterCount, learning.ActorLearningRate);
        _criticOpt = local.Optimiser == LocalOptimiser.Adam
            ? new Adam(critic.ParameterCount, learning.CriticLearningRate)
            : new Sgd(critic.ParameterCount, learning.CriticLearningRate);
        _actorGrad = new float[actor.ParameterCount];
        _criticGrad = new float[critic.ParameterCount];
        _actorOut = new float[actor.Shape.OutputSize];
        _actorOutGrad = new float[actor.Shape.OutputSize];
        _values = new float[critic.Shape.OutputSize];
        _valueGrad = new float[critic.Shape.OutputSize];
        _returnBuffer = new float[1];
        _actorRanges = TrainedRanges(actor, household, actor.Shape.OutputSize / actor.Shape.BlockCount);
        _criticRanges = TrainedRanges(critic, household, critic.Shape.OutputSize / critic.Shape.BlockCount);
    }

    /// <summary>
    /// The ranges of the flat gradient that household m's split backward passes can make non-zero, ascending: its
    /// first-layer columns W_m, the first-layer bias and every hidden layer, and its own rows and biases of the output
    /// layer. The rest of the gradient stays zero, so clearing, clipping and optimiser steps run on these ranges only
    /// (same result bit for bit as on the whole vector; see <see cref="IOptimiser.Step(Span{float}, ReadOnlySpan{float}, ReadOnlySpan{ValueTuple{int, int}})"/>).
    /// </summary>
    /// <param name="network">The household's network.</param>
    /// <param name="household">m.</param>
    /// <param name="outputsPerHousehold">Outputs of household m's head (2k for the actor, 1 for the critic).</param>
    /// <returns>(offset, length) ranges.</returns>
    internal static (int Offset, int Length)[] TrainedRanges(DenseNetwork network, int household, int outputsPerHousehold)
    {
        if (network.LayerCount < 2)
        {
            return [(0, network.ParameterCount)];
        }
        var owned = Coordination.Coordinator.OwnedRanges(network, household, outputsPerHousehold);
        int hidden = network.BiasOffset(0);
        return [owned[0], (hidden, network.WeightOffset(network.LayerCount - 1) - hidden), owned[1], owned[2]];
    }

    /// <summary>Optimiser steps taken since the last reset.</summary>
    public long Steps => _actorOpt.StepCount;

    /// <summary>Forgets the optimisers' moments (after a broadcast replaced the parameters).</summary>
    public void ResetOptimisers()
    {
        _actorOpt.Reset();
        _criticOpt.Reset();
    }

    /// <summary>Trains on rows [0, Count − 1) of <paramref name="buffer"/>; returns the number of transitions used.</summary>
    /// <param name="buffer">The household's transitions.</param>
    /// <returns>Transitions trained on (0 when fewer than two rows).</returns>
    public int Train(TransitionBuffer buffer)
    {
        ArgumentNullException.ThrowIfNull(buffer);
        int usable = buffer.Count - 1;
        if (usable < 1)
        {
            return 0;
        }
        int window = _local.FullBatch ? usable : _learning.RolloutSteps;
        for (int e = 0; e < _local.Epochs; e++)
        {
            for (int a = 0; a < usable; a += window)
            {
                int b = Math.Min(usable, a + window);
                Window(buffer, a, b);
            }
        }
        return usable;
    }

    /// <summary>
    /// The local warm start on a round of demonstrated rows (<see cref="LocalWarmStartOptions"/>; the rule of
    /// <see cref="ActorCriticLearner.WarmStart"/> restricted to household m): the actor's own means are fitted by least
    /// squares to the cloned pre-squash targets the household stored as the rows' pre-squash actions (heads with an
    /// empty box do not count), its own critic head to the discounted returns of its own scaled costs over rows
    /// [0, Count − 1), bootstrapped by that head at row Count − 1 and recomputed every pass. Every forward pass is the
    /// split one with the stored sums of the others, so gradients reach W_m and the shared parameters only. Adam with
    /// the warm start's own step size and fresh moments; the round's optimisers are not touched.
    /// </summary>
    /// <param name="buffer">The household's demonstrated rows.</param>
    /// <param name="seed">Seed of the shuffled order.</param>
    /// <returns>The actor's mean squared pre-squash error (per row, halved) and the critic's of the last pass.</returns>
    public (double ActorLoss, double CriticLoss) WarmStart(TransitionBuffer buffer, ulong seed)
    {
        ArgumentNullException.ThrowIfNull(buffer);
        LocalWarmStartOptions o = _local.WarmStart;
        int rows = buffer.Count, k = buffer.Actions;
        if (rows < 1)
        {
            return (0, 0);
        }
        _warmActorOpt ??= new Adam(_actor.ParameterCount, o.LearningRate);
        _warmCriticOpt ??= new Adam(_critic.ParameterCount, o.LearningRate);
        _warmActorOpt.Reset();
        _warmCriticOpt.Reset();
        if (_warmOrder.Length < rows)
        {
            _warmOrder = new int[buffer.Capacity];
            _warmTargets = new float[buffer.Capacity];
        }
        int[] order = _warmOrder;
        float[] targets = _warmTargets;
        for (int i = 0; i < rows; i++)
        {
            order[i] = i;
        }
        var shuffle = new LearningRandom(seed);
        float gamma = (float)_learning.Gamma;
        int criticRows = rows - 1; // the last row only bootstraps (its successor is not known yet)
        double actorLoss = 0, criticLoss = 0;
        for (int epoch = 0; epoch < o.Epochs; epoch++)
        {
            if (criticRows > 0)
            {
                float ret = CriticValue(buffer, rows - 1);
                for (int i = criticRows - 1; i >= 0; i--)
                {
                    ret = (float)(buffer.Cost[i] * _learning.CostScale) + gamma * ret;
                    targets[i] = ret;
                }
            }
            for (int i = rows - 1; i > 0; i--)
            {
                int j = shuffle.NextInt(i + 1);
                (order[i], order[j]) = (order[j], order[i]);
            }
            actorLoss = criticLoss = 0;
            for (int start = 0; start < rows; start += o.BatchSize)
            {
                int end = Math.Min(rows, start + o.BatchSize);
                float weight = 1f / (end - start);
                Clear(_actorGrad, _actorRanges);
                Clear(_criticGrad, _criticRanges);
                for (int b = start; b < end; b++)
                {
                    int i = order[b];
                    if (i < criticRows)
                    {
                        Array.Clear(_valueGrad);
                        _critic.ForwardSplit(_m, buffer.StateRow(i), buffer.CriticOthersRow(i), _cw, _values);
                        _returnBuffer[0] = targets[i];
                        criticLoss += ActorCriticLoss.Critic(_values.AsSpan(_m, 1), _returnBuffer, weight, _valueGrad.AsSpan(_m, 1)) * (end - start) / criticRows;
                        _critic.Backward(_cw, _valueGrad, _criticGrad);
                    }
                    _actor.ForwardSplit(_m, buffer.StateRow(i), buffer.ActorOthersRow(i), _aw, _actorOut);
                    Array.Clear(_actorOutGrad);
                    ReadOnlySpan<float> lo = buffer.LowerRow(i), hi = buffer.UpperRow(i), target = buffer.PreSquashRow(i);
                    for (int j = 0; j < k; j++)
                    {
                        if (!ActorCriticLearner.HasCloneTarget(lo[j], hi[j]))
                        {
                            continue; // an empty box: no action to clone
                        }
                        int mean = 2 * k * _m + j;
                        float d = _actorOut[mean] - target[j];
                        _actorOutGrad[mean] = weight * d;
                        actorLoss += 0.5 * d * d / rows;
                    }
                    _actor.Backward(_aw, _actorOutGrad, _actorGrad);
                }
                GradientClipping.ClipGlobalNorm(_criticGrad, _learning.MaxGradientNorm, _criticRanges);
                GradientClipping.ClipGlobalNorm(_actorGrad, _learning.MaxGradientNorm, _actorRanges);
                _warmCriticOpt.Step(_critic.Parameters, _criticGrad, _criticRanges);
                _warmActorOpt.Step(_actor.Parameters, _actorGrad, _actorRanges);
            }
        }
        return (actorLoss, criticLoss);
    }

    private float CriticValue(TransitionBuffer buffer, int row)
    {
        _critic.ForwardSplit(_m, buffer.StateRow(row), buffer.CriticOthersRow(row), _cw, _values);
        return _values[_m];
    }

    private void Window(TransitionBuffer buffer, int a, int b)
    {
        // Only the trained ranges of the gradients can be non-zero (see TrainedRanges); the rest stays zero.
        Clear(_actorGrad, _actorRanges);
        Clear(_criticGrad, _criticRanges);
        Array.Clear(_actorOutGrad);
        Array.Clear(_valueGrad);
        float gamma = (float)_learning.Gamma;
        float weight = 1f / (b - a);
        int k = buffer.Actions;
        float ret = CriticValue(buffer, b);
        for (int i = b - 1; i >= a; i--)
        {
            ret = (float)(buffer.Cost[i] * _learning.CostScale) + gamma * ret;
            float v = CriticValue(buffer, i);
            float advantage = ret - v;
            _returnBuffer[0] = ret;
            ActorCriticLoss.Critic(_values.AsSpan(_m, 1), _returnBuffer, weight, _valueGrad.AsSpan(_m, 1));
            _critic.Backward(_cw, _valueGrad, _criticGrad);

            _actor.ForwardSplit(_m, buffer.StateRow(i), buffer.ActorOthersRow(i), _aw, _actorOut);
            _returnBuffer[0] = advantage;
            ActorCriticLoss.Actor(_actorOut.AsSpan(2 * k * _m, 2 * k), buffer.PreSquashRow(i), _returnBuffer,
                buffer.LowerRow(i), buffer.UpperRow(i), k, _learning.EntropyCoefficient, _learning.LogStdMin, _learning.LogStdMax,
                weight, _actorOutGrad.AsSpan(2 * k * _m, 2 * k));
            _actor.Backward(_aw, _actorOutGrad, _actorGrad);
        }
        GradientClipping.ClipGlobalNorm(_criticGrad, _learning.MaxGradientNorm, _criticRanges);
        GradientClipping.ClipGlobalNorm(_actorGrad, _learning.MaxGradientNorm, _actorRanges);
        _criticOpt.Step(_critic.Parameters, _criticGrad, _criticRanges);
        _actorOpt.Step(_actor.Parameters, _actorGrad, _actorRanges);
    }

    private static void Clear(float[] gradient, (int Offset, int Length)[] ranges)
    {
        foreach (var (o, n) in ranges)
        {
            gradient.AsSpan(o, n).Clear();
        }
    }
}
