namespace FedGrid.Audit.Attacks;

/// <summary>
/// An attack supplied from outside this assembly (e.g. one that needs a native autograd library). Like the built-in
/// attacks it receives only the <see cref="AttackerView"/> and the declared side information, never ground truth;
/// its reconstructions take part in the joint fusion.
/// </summary>
public interface IViewAttack
{
    /// <summary>Attack name in results.</summary>
    string Name { get; }

    /// <summary>Runs the attack.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="reconstructions">Receives the reconstructions.</param>
    /// <param name="identifiability">Receives identifiability figures.</param>
    /// <param name="notes">Receives what could not be done.</param>
    void Run(AttackerView view, AttackOptions options, List<Reconstruction> reconstructions, List<Identifiability> identifiability, List<string> notes);
}
