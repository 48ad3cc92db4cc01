using System.CommandLine;
using FedGrid.Cli.Commands;

namespace FedGrid.Cli.Tests;

public sealed class HostOptionsTests
{
    private static ParseResult Parse(Option option, string args)
    {
        var cmd = new Command("probe") { option };
        return cmd.Parse(args);
    }

    [Fact]
    public void Durations_in_seconds_must_be_positive_and_name_their_option()
    {
        var round = new Option<double>("--round-timeout") { DefaultValueFactory = _ => 60 };
        Assert.Equal(TimeSpan.FromSeconds(60), HostOptions.Seconds(Parse(round, ""), round));
        Assert.Equal(TimeSpan.FromSeconds(2.5), HostOptions.Seconds(Parse(round, "--round-timeout 2.5"), round));
        var e = Assert.Throws<UserInputException>(() => HostOptions.Seconds(Parse(round, "--round-timeout 0"), round));
        Assert.Equal("--round-timeout must be positive, got 0", e.Message);

        Option<double?> step = HostOptions.StepTimeout();
        Assert.Null(HostOptions.Seconds(Parse(step, ""), step));
        Assert.Equal(TimeSpan.FromSeconds(2), HostOptions.Seconds(Parse(step, "--step-timeout 2"), step));
        var e2 = Assert.Throws<UserInputException>(() => HostOptions.Seconds(Parse(step, "--step-timeout -1"), step));
        Assert.Equal("--step-timeout must be positive, got -1", e2.Message);
    }

    [Fact]
    public void Coordinator_and_launch_share_the_step_timeout_option()
    {
        foreach (string verb in new[] { "coordinator", "launch" })
            Assert.Contains(Verbs.All().Single(c => c.Name == verb).Options, o => o.Name == "--step-timeout");
    }
}
