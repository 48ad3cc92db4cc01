using System.CommandLine;
using FedGrid.Cli;

var root = new RootCommand(
    "fedgrid — measures what a federated demand-response scheme exposes about each household, and what protecting it costs.");
foreach (Command verb in Verbs.All())
    root.Subcommands.Add(verb);
return await CliRunner.RunAsync(root, args);
