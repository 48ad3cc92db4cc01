using System.Diagnostics;
using System.Globalization;
using System.Text.Json;

namespace FedGrid.Federation.Tests;

/// <summary>Runs tests/reference/rdp_reference.py with Debian's /usr/bin/python3 (python3-scipy).</summary>
internal static class PrivacyReference
{
    private const string Python = "/usr/bin/python3";

    public static string Root { get; } = FindRoot();

    public static JsonDocument Run(params string[] args)
    {
        if (!File.Exists(Python))
        {
            Assert.Fail($"{Python} not found. Run `bash tests/run.sh` on a Debian machine; it installs python3-scipy.");
        }
        var psi = new ProcessStartInfo(Python) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        psi.ArgumentList.Add(Path.Combine(Root, "tests", "reference", "rdp_reference.py"));
        foreach (string a in args)
        {
            psi.ArgumentList.Add(a);
        }
        using Process p = Process.Start(psi)!;
        Task<string> stdout = p.StandardOutput.ReadToEndAsync();
        Task<string> stderr = p.StandardError.ReadToEndAsync();
        p.WaitForExit();
        Assert.True(p.ExitCode == 0, $"rdp_reference.py failed (exit {p.ExitCode}): {stderr.Result}");
        return JsonDocument.Parse(stdout.Result);
    }

    public static string List(IEnumerable<double> values) => string.Join(",", values.Select(v => v.ToString("R", CultureInfo.InvariantCulture)));

    private static string FindRoot()
    {
        for (var dir = new DirectoryInfo(AppContext.BaseDirectory); dir is not null; dir = dir.Parent)
        {
            if (File.Exists(Path.Combine(dir.FullName, "FedGrid.sln")))
            {
                return dir.FullName;
            }
        }
        throw new InvalidOperationException($"repository root (FedGrid.sln) not found above {AppContext.BaseDirectory}");
    }
}
