using System.CommandLine;
using FedGrid.Hosting;

namespace FedGrid.Cli.Commands;

/// <summary><c>fedgrid certificates</c>: a scenario CA, the coordinator's certificate and one client certificate per household, for multi-machine runs.</summary>
internal static class CertificatesCommand
{
    public static Command Create()
    {
        var (runOptions, read) = HostOptions.Create(householdsRequired: false);
        var output = new Option<string>("--out") { Description = "folder to write ca.crt, coordinator.pfx and <id>.pfx to", Required = true };
        var names = new Option<string[]>("--server-name") { Description = "DNS name or IP address of the coordinator (repeatable; loopback names are always included)", AllowMultipleArgumentsPerToken = true };
        var cmd = new Command("certificates", "Make the certificates of a mutual-TLS run: a scenario CA, the coordinator's server certificate and one client certificate per household (named by its id).");
        foreach (Option o in runOptions)
            cmd.Options.Add(o);
        cmd.Options.Add(output);
        cmd.Options.Add(names);
        cmd.SetAction(parse =>
        {
            var scenario = read(parse).CreateScenario();
            string folder = parse.GetValue(output)!;
            ScenarioCertificates.Create(folder, scenario.Households.Select(h => h.Id), parse.GetValue(names));
            Console.Out.WriteLine($"certificates: CA, coordinator and {scenario.Households.Length} households in {folder}; give each machine ca.crt and its own .pfx only");
            return CliRunner.ExitOk;
        });
        return cmd;
    }
}
