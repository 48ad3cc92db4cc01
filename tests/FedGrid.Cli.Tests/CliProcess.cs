using System.Diagnostics;

namespace FedGrid.Cli.Tests;

/// <summary>Runs the built <c>fedgrid</c> CLI (copied beside the tests) as a separate process.</summary>
internal static class CliProcess
{
    public static string RepoRoot { get; } = FindRoot();

    public static (int Code, string Out, string Err) Run(params string[] args)
    {
        string dll = Path.Combine(AppContext.BaseDirectory, "fedgrid.dll");
        Assert.True(File.Exists(dll), $"built CLI not found at {dll}");
        string host = Environment.GetEnvironmentVariable("DOTNET_HOST_PATH") is { Length: > 0 } h && File.Exists(h) ? h : "dotnet";
        var psi = new ProcessStartInfo(host) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        psi.ArgumentList.Add(dll);
        foreach (string a in args) psi.ArgumentList.Add(a);
        using var p = Process.Start(psi)!;
        Task<string> stdout = p.StandardOutput.ReadToEndAsync();
        Task<string> stderr = p.StandardError.ReadToEndAsync();
        if (!p.WaitForExit(120_000))
        {
            p.Kill(entireProcessTree: true);
            Assert.Fail("fedgrid did not finish within 120 s");
        }
        return (p.ExitCode, stdout.Result, stderr.Result);
    }

    private static string FindRoot()
    {
        for (var dir = new DirectoryInfo(AppContext.BaseDirectory); dir is not null; dir = dir.Parent)
            if (File.Exists(Path.Combine(dir.FullName, "FedGrid.sln")))
                return dir.FullName;
        throw new InvalidOperationException("repository root (FedGrid.sln) not found");
    }
}
