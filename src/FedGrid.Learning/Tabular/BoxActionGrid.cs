namespace FedGrid.Learning.Tabular;

/// <summary>
/// Discrete actions inside a box that may move every step: with L levels per action and k actions, index i
/// encodes one level per action (mixed radix, action 0 least significant) and level ℓ maps to lo + (hi − lo)·ℓ/(L − 1)
/// (the midpoint when L = 1).
/// </summary>
public sealed class BoxActionGrid
{
    /// <summary>Creates a grid.</summary>
    /// <param name="levels">Levels per action (≥ 1).</param>
    /// <param name="actionsPerAgent">Actions per agent k (≥ 1).</param>
    public BoxActionGrid(int levels, int actionsPerAgent = 1)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(levels, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(actionsPerAgent, 1);
        Levels = levels;
        ActionsPerAgent = actionsPerAgent;
        long count = 1;
        for (int j = 0; j < actionsPerAgent; j++)
        {
            count *= levels;
        }
        if (count > int.MaxValue)
        {
            throw new ArgumentException("Too many joint actions.");
        }
        Count = (int)count;
    }

    /// <summary>Levels per action.</summary>
    public int Levels { get; }

    /// <summary>Actions per agent.</summary>
    public int ActionsPerAgent { get; }

    /// <summary>Number of discrete joint actions, Levels^k.</summary>
    public int Count { get; }

    /// <summary>Writes the continuous actions of discrete index <paramref name="index"/> inside the given box.</summary>
    /// <param name="index">Discrete action in [0, <see cref="Count"/>).</param>
    /// <param name="lower">Lower bounds (k).</param>
    /// <param name="upper">Upper bounds (k).</param>
    /// <param name="actions">Receives k actions.</param>
    public void Decode(int index, ReadOnlySpan<float> lower, ReadOnlySpan<float> upper, Span<float> actions)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(index);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(index, Count);
        for (int j = 0; j < ActionsPerAgent; j++)
        {
            int level = index % Levels;
            index /= Levels;
            float f = Levels == 1 ? 0.5f : (float)level / (Levels - 1);
            actions[j] = lower[j] + (upper[j] - lower[j]) * f;
        }
    }
}
