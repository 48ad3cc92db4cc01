namespace FedGrid.Learning.Tasks;

/// <summary>
/// What a learner knows of an environment: several agents (households), each with a state block of the same
/// width and a bounded action vector; every step each agent pays a cost to be minimised. An adapter to any
/// concrete environment is a thin class implementing this interface. Implementations should not allocate in
/// <see cref="Observe"/>, <see cref="GetBounds"/> or <see cref="Step"/>.
/// </summary>
public interface IControlTask
{
    /// <summary>Number of agents M.</summary>
    int AgentCount { get; }

    /// <summary>Features in each agent's state block.</summary>
    int StateSizePerAgent { get; }

    /// <summary>Actions per agent (usually 1: the flexible setpoint).</summary>
    int ActionSizePerAgent { get; }

    /// <summary>Starts a new episode; the same seed gives the same episode.</summary>
    /// <param name="seed">Episode seed.</param>
    void Reset(ulong seed);

    /// <summary>Writes the current state, agent-major: agent m's block at m·<see cref="StateSizePerAgent"/>.</summary>
    /// <param name="state">Length M·<see cref="StateSizePerAgent"/>.</param>
    void Observe(Span<float> state);

    /// <summary>Writes the current box bounds of every action, agent-major (lo ≤ hi).</summary>
    /// <param name="lower">Length M·<see cref="ActionSizePerAgent"/>.</param>
    /// <param name="upper">Length M·<see cref="ActionSizePerAgent"/>.</param>
    void GetBounds(Span<float> lower, Span<float> upper);

    /// <summary>Applies one action per agent and action slot, writes each agent's cost of the step, and tells whether the episode ended.</summary>
    /// <param name="actions">Length M·<see cref="ActionSizePerAgent"/>, inside the bounds.</param>
    /// <param name="costs">Receives M costs.</param>
    /// <returns>True when the episode is over (no further state).</returns>
    bool Step(ReadOnlySpan<float> actions, Span<float> costs);
}
