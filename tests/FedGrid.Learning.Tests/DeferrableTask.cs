using FedGrid.Learning.Randomness;
using FedGrid.Learning.Tasks;

namespace FedGrid.Learning.Tests;

/// <summary>
/// A task with carry-over written for the tests: each agent must take <see cref="Energy"/> units over
/// <see cref="Steps"/> slots, at most 1 per slot and at most what remains (the box [0, min(1, remaining)] moves);
/// each slot's price is drawn per episode from a known daily shape plus noise and shown in the state, together with
/// the remaining energy and the time of day. Cost per slot: price·a; energy still missing after the last slot costs
/// <see cref="ShortfallPrice"/> per unit. The cheapest plan buys in the cheapest slots; buying at once
/// (no control) pays the first slots' prices.
/// </summary>
internal sealed class DeferrableTask(int agents) : IControlTask
{
    public const int Steps = 8;
    public const float Energy = 3f;
    public const float ShortfallPrice = 3f;
    private readonly float[] _remaining = new float[agents];
    private readonly float[] _price = new float[agents * Steps];
    private int _t;

    public int AgentCount { get; } = agents;

    public int StateSizePerAgent => 3;

    public int ActionSizePerAgent => 1;

    public void Reset(ulong seed)
    {
        var rng = new LearningRandom(seed);
        _t = 0;
        Array.Fill(_remaining, Energy);
        for (int m = 0; m < AgentCount; m++)
        {
            for (int t = 0; t < Steps; t++)
            {
                // expensive early, cheap in the middle, medium late
                float shape = t < 3 ? 1.5f : t < 6 ? 0.5f : 1.0f;
                _price[m * Steps + t] = shape + rng.NextSingle(-0.2f, 0.2f);
            }
        }
    }

    public void Observe(Span<float> state)
    {
        for (int m = 0; m < AgentCount; m++)
        {
            state[3 * m] = _remaining[m] / Energy;
            state[3 * m + 1] = _price[m * Steps + _t];
            state[3 * m + 2] = (float)_t / Steps;
        }
    }

    public void GetBounds(Span<float> lower, Span<float> upper)
    {
        for (int m = 0; m < AgentCount; m++)
        {
            lower[m] = 0f;
            upper[m] = Math.Min(1f, _remaining[m]);
        }
    }

    public bool Step(ReadOnlySpan<float> actions, Span<float> costs)
    {
        for (int m = 0; m < AgentCount; m++)
        {
            float a = Math.Clamp(actions[m], 0f, Math.Min(1f, _remaining[m]));
            _remaining[m] -= a;
            costs[m] = _price[m * Steps + _t] * a;
        }
        _t++;
        bool done = _t >= Steps;
        if (done)
        {
            for (int m = 0; m < AgentCount; m++)
            {
                costs[m] += ShortfallPrice * _remaining[m];
            }
        }
        return done;
    }

    /// <summary>Cost of buying as early as possible (no control), summed over agents, for an episode seed.</summary>
    public double NoControlCost(ulong seed)
    {
        Reset(seed);
        float[] lo = new float[AgentCount], hi = new float[AgentCount], c = new float[AgentCount];
        double total = 0;
        bool done = false;
        while (!done)
        {
            GetBounds(lo, hi);
            done = Step(hi, c);
            total += c.Sum();
        }
        return total;
    }

    /// <summary>Cost of the best plan with the episode's prices known: the Energy cheapest slots (all prices &lt; shortfall).</summary>
    public double OptimalCost(ulong seed)
    {
        Reset(seed);
        double total = 0;
        for (int m = 0; m < AgentCount; m++)
        {
            total += _price.AsSpan(m * Steps, Steps).ToArray().OrderBy(p => p).Take((int)Energy).Sum();
        }
        return total;
    }
}
