using System.Diagnostics;
using System.Text.Json;

namespace FedGrid.TestSupport;

/// <summary>One program's answer from tests/reference/cone_reference.py (CVXOPT).</summary>
internal sealed record ReferenceAnswer(string Status, double? Objective, double[]? X, double MedianMs);

/// <summary>Runs the CVXOPT reference script with Debian's /usr/bin/python3 on exported programs.</summary>
internal static class CvxoptReference
{
    public const string Python = "/usr/bin/python3";

    /// <summary>Throws with instructions when Debian's python3 or its cvxopt module is missing.</summary>
    public static void EnsureAvailable()
    {
        if (!File.Exists(Python))
            throw new InvalidOperationException($"{Python} not found: the CVXOPT outside checks need Debian's python3 with python3-cvxopt; run bash tests/run.sh, which installs them");
        var (code, _, err) = Run("-c \"import cvxopt\"");
        if (code != 0)
            throw new InvalidOperationException($"CVXOPT is missing ({err.Trim()}): run bash tests/run.sh, which installs the Debian package python3-cvxopt");
    }

    /// <summary>Solves the files in one Python process; mode "qp" or "feasibility".</summary>
    public static IReadOnlyList<ReferenceAnswer> Solve(IReadOnlyList<string> files, string mode = "qp", int repeat = 1)
    {
        EnsureAvailable();
        string script = TestFeeders.RepoFile(Path.Combine("tests", "reference", "cone_reference.py"));
        string args = $"\"{script}\" --mode {mode} --repeat {repeat} " + string.Join(' ', files.Select(f => $"\"{f}\""));
        var (code, stdout, stderr) = Run(args);
        if (code != 0) throw new InvalidOperationException($"cone_reference.py failed ({code}): {stderr}");
        using var doc = JsonDocument.Parse(stdout);
        var list = new List<ReferenceAnswer>();
        foreach (var e in doc.RootElement.EnumerateArray())
        {
            double? obj = e.GetProperty("objective").ValueKind == JsonValueKind.Number ? e.GetProperty("objective").GetDouble() : null;
            double[]? x = e.GetProperty("x").ValueKind == JsonValueKind.Array ? e.GetProperty("x").EnumerateArray().Select(v => v.GetDouble()).ToArray() : null;
            list.Add(new ReferenceAnswer(e.GetProperty("status").GetString()!, obj, x, e.GetProperty("medianMs").GetDouble()));
        }
        return list;
    }

    private static (int Code, string Out, string Err) Run(string args)
    {
        var psi = new ProcessStartInfo(Python, args) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        using var p = Process.Start(psi)!;
        var outTask = p.StandardOutput.ReadToEndAsync();
        string err = p.StandardError.ReadToEnd();
        p.WaitForExit();
        return (p.ExitCode, outTask.Result, err);
    }
}
