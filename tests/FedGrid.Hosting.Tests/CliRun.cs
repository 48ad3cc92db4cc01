using System.Diagnostics;

namespace FedGrid.Hosting.Tests;

/// <summary>One <c>fedgrid</c> command run to its end as a separate process, its standard output and error kept apart.</summary>
internal static class CliRun
{
    /// <summary>
    /// Runs <c>dotnet fedgrid.dll args</c>; a run still going after <paramref name="limit"/> is killed with its child
    /// processes and reported as a <see cref="TimeoutException"/> carrying what it printed, so a stuck run fails its test
    /// instead of holding the whole suite.
    /// </summary>
    public static async Task<(int Code, string Stdout, string Stderr)> RunAsync(TimeSpan limit, params string[] args)
    {
        string dll = typeof(FedGrid.Cli.Commands.LaunchCommand).Assembly.Location;
        var info = new ProcessStartInfo("dotnet") { RedirectStandardOutput = true, RedirectStandardError = true };
        info.ArgumentList.Add(dll);
        foreach (string a in args)
        {
            info.ArgumentList.Add(a);
        }
        using Process p = Process.Start(info)!;
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
