using System.CommandLine;

namespace FedGrid.Cli;

/// <summary>The verbs of the <c>fedgrid</c> command; each lives in its own file under Commands/.</summary>
internal static class Verbs
{
    public static IEnumerable<Command> All()
    {
        yield return Commands.FlowCommand.Create();
        yield return Commands.DemoCommand.Create();
        yield return Commands.TrainCommand.Create();
        yield return Commands.OptimumCommand.Create();
        yield return Commands.ProjectCommand.Create();
        yield return Commands.AuditCommand.Create();
        yield return Commands.CoordinatorCommand.Create();
        yield return Commands.HouseholdCommand.Create();
        yield return Commands.LaunchCommand.Create();
        yield return Commands.CertificatesCommand.Create();
        yield return Commands.SweepCommand.Create();
    }
}
