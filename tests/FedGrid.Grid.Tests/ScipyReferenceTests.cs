using System.Diagnostics;
using System.Text.Json;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Grid.Tests;

/// <summary>
/// Outside check: tests/reference/ac_power_flow.py solves the same feeders by Newton–Raphson on the
/// bus power mismatch equations with SciPy (Debian python3-scipy, /usr/bin/python3); every bus
/// voltage magnitude must agree with our backward/forward sweep within 1e-6 pu.
/// </summary>
public sealed class ScipyReferenceTests
{
    private const string Python = "/usr/bin/python3";

    public static TheoryData<string> Feeders => new() { "baran-wu-33", "generated-330", "generated-1650" };

    [Theory]
    [MemberData(nameof(Feeders))]
    public void Every_bus_voltage_agrees_with_scipy_newton_raphson(string which)
    {
        RequireScipy();
        Feeder feeder = which switch
        {
            "baran-wu-33" => FeederFile.Load(RepoPaths.Sample("baran-wu-33.json")),
            "generated-330" => FeederGenerator.Generate(330, seed: 1),
            _ => FeederGenerator.Generate(1650, seed: 1),
        };
        string path = Path.Combine(Path.GetTempPath(), $"fedgrid-ref-{which}-{Guid.NewGuid():N}.json");
        try
        {
            FeederFile.Write(feeder, path);
            using JsonDocument reference = RunReference(path);
            JsonElement root = reference.RootElement;
            Assert.True(root.GetProperty("converged").GetBoolean(), "SciPy reference did not converge");

            PowerFlowResult ours = new AcPowerFlow(feeder.Network).SolveBaseCase();
            Assert.True(ours.Converged);
            int count = 0;
            double worst = 0;
            foreach (JsonElement bus in root.GetProperty("buses").EnumerateArray())
            {
                int i = feeder.IndexOf(bus.GetProperty("id").GetString()!);
                double diff = Math.Abs(ours.VoltagePu[i] - bus.GetProperty("vmPu").GetDouble());
                worst = Math.Max(worst, diff);
                count++;
            }
            Assert.Equal(feeder.Buses.Count, count);
            Assert.True(worst <= 1e-6, $"largest voltage difference {worst:E3} pu exceeds 1e-6 pu");
            // Losses agree too (relative 1e-6).
            double refLoss = root.GetProperty("lossKw").GetDouble();
            Assert.Equal(1.0, feeder.Network.ToKw(ours.LossPu) / refLoss, 6);
        }
        finally
        {
            File.Delete(path);
        }
    }

    private static void RequireScipy()
    {
        var (code, _, err) = Run(Python, "-c \"import scipy.sparse.linalg, numpy\"");
        if (code != 0)
            Assert.Fail($"{Python} cannot import scipy (exit {code}: {err.Trim()}). Run `bash tests/run.sh`, which installs the Debian package python3-scipy.");
    }

    private static JsonDocument RunReference(string feederPath)
    {
        var (code, output, err) = Run(Python, $"\"{RepoPaths.ReferenceScript}\" \"{feederPath}\"");
        Assert.True(code == 0, $"reference script failed (exit {code}): {err}");
        return JsonDocument.Parse(output);
    }

    internal static (int Code, string Out, string Err) Run(string exe, string args)
    {
        if (!File.Exists(exe))
            Assert.Fail($"{exe} not found. Run `bash tests/run.sh` on a Debian machine; it installs python3-scipy.");
        var psi = new ProcessStartInfo(exe, args) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        using var p = Process.Start(psi)!;
        Task<string> stdout = p.StandardOutput.ReadToEndAsync();
        Task<string> stderr = p.StandardError.ReadToEndAsync();
        p.WaitForExit();
        return (p.ExitCode, stdout.Result, stderr.Result);
    }
}
