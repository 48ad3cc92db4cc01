using FedGrid.Learning.Randomness;
using FedGrid.Learning.Tasks;

namespace FedGrid.Learning.Tests;

/// <summary>
/// A small bounded control task written for the tests: each agent sees a target inside its box [lo_m, hi_m] and a
/// constant feature, and pays (a − target)² per step; the target moves at random every step. Episodes last
/// <see cref="Steps"/> steps. The best policy puts the action on the target (cost 0).
/// </summary>
internal sealed class TrackingTask(int agents, int steps = 16) : IControlTask
{
    private readonly float[] _target = new float[agents];
    private LearningRandom _random = new(0);
    private int _t;

    public int Steps { get; } = steps;

    public int AgentCount { get; } = agents;

    public int StateSizePerAgent => 2;

    public int ActionSizePerAgent => 1;

    private static float Lo(int m) => -1f + 0.5f * (m % 3);

    private static float Hi(int m) => Lo(m) + 2f;

    public void Reset(ulong seed)
    {
        _random = new LearningRandom(seed);
        _t = 0;
        Draw();
    }

    public void Observe(Span<float> state)
    {
        for (int m = 0; m < AgentCount; m++)
        {
            state[2 * m] = _target[m];
            state[2 * m + 1] = 1f;
        }
    }

    public void GetBounds(Span<float> lower, Span<float> upper)
    {
        for (int m = 0; m < AgentCount; m++)
        {
            lower[m] = Lo(m);
            upper[m] = Hi(m);
        }
    }

    public bool Step(ReadOnlySpan<float> actions, Span<float> costs)
    {
        for (int m = 0; m < AgentCount; m++)
        {
            Assert.InRange(actions[m], Lo(m), Hi(m));
            float d = actions[m] - _target[m];
            costs[m] = d * d;
        }
        _t++;
        Draw();
        return _t >= Steps;
    }

    private void Draw()
    {
        for (int m = 0; m < AgentCount; m++)
        {
            _target[m] = _random.NextSingle(Lo(m) + 0.2f, Hi(m) - 0.2f);
        }
    }
}
