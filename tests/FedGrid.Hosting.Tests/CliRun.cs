using System.Diagnostics;

namespace FedGrid.Hosting.Tests;

/// <summary>One <c>fedgrid</c> command run to its end as a separate process, its standard output and error kept apart.</summary>
internal static class CliRun
{
    /// <summary><c>dotnet fedgrid.dll args</c> with both output streams redirected, optionally under a wrapper (e.g. <c>ip netns exec NS</c>).</summary>
    public static ProcessStartInfo StartInfo(IEnumerable<string> wrapper, IEnumerable<string> args)
    {
        string dll = typeof(FedGrid.Cli.Commands.LaunchCommand).Assembly.Location;
        var all = wrapper.Concat(["dotnet", dll]).Concat(args).ToList();
        var info = new ProcessStartInfo(all[0]) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        foreach (string a in all.Skip(1))
        {
            info.ArgumentList.Add(a);
        }
        return info;
    }

    /// <summary>
    /// Runs <c>dotnet fedgrid.dll args</c>; a run still going after <paramref name="limit"/> is killed with its child
    /// processes and reported as a <see cref="TimeoutException"/> carrying what it printed, so a stuck run fails its test
    /// instead of holding the whole suite.
    /// </summary>
    public static async Task<(int Code, string Stdout, string Stderr)> RunAsync(TimeSpan limit, params string[] args)
    {
        using Process p = Process.Start(StartInfo([], args))!;
        Task<string> stdout = p.StandardOutput.ReadToEndAsync(), stderr = p.StandardError.ReadToEndAsync();
        try
        {
            await Task.WhenAll(stdout, stderr, p.WaitForExitAsync()).WaitAsync(limit);
        }
        catch (TimeoutException)
        {
            p.Kill(entireProcessTree: true);
            await p.WaitForExitAsync();
            string said = await stderr.WaitAsync(TimeSpan.FromSeconds(10));
            throw new TimeoutException($"'fedgrid {string.Join(' ', args)}' still running after {limit.TotalSeconds:0} s; killed. Its standard error:\n{said}");
        }
        return (p.ExitCode, await stdout, await stderr);
    }
}
