namespace FedGrid.Learning.Tabular;

/// <summary>A tabular learner of expected discounted cost over discrete states and actions.</summary>
public interface ITabularLearner
{
    /// <summary>Number of discrete states.</summary>
    int StateCount { get; }

    /// <summary>Number of discrete actions.</summary>
    int ActionCount { get; }

    /// <summary>Updates made so far (the ε schedule's counter).</summary>
    long StepCount { get; }

    /// <summary>ε-greedy action at <paramref name="state"/> (random with probability ε, else greedy).</summary>
    /// <param name="state">State index.</param>
    /// <returns>Action index.</returns>
    int SelectAction(int state);

    /// <summary>Action of least estimated cost at <paramref name="state"/> (lowest index on ties).</summary>
    /// <param name="state">State index.</param>
    /// <returns>Action index.</returns>
    int GreedyAction(int state);

    /// <summary>Learns from one transition.</summary>
    /// <param name="state">State index.</param>
    /// <param name="action">Action index.</param>
    /// <param name="cost">Cost of the transition.</param>
    /// <param name="nextState">Next state index (ignored when terminal).</param>
    /// <param name="terminal">True when the episode ended (no bootstrap).</param>
    void Update(int state, int action, double cost, int nextState, bool terminal);

    /// <summary>Estimated expected discounted cost of the action at the state.</summary>
    /// <param name="state">State index.</param>
    /// <param name="action">Action index.</param>
    /// <returns>Q(s, a).</returns>
    double Q(int state, int action);

    /// <summary>min over actions of Q(s, ·).</summary>
    /// <param name="state">State index.</param>
    /// <returns>The state's estimated value.</returns>
    double Value(int state);
}
