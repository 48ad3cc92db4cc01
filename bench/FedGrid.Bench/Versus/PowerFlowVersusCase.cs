using System.Diagnostics;
using System.Globalization;
using System.Text.Json;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Bench.Versus;

/// <summary>
/// Exact AC power flow, ours (backward/forward sweep, timed in this process) against the SciPy
/// Newton–Raphson reference in tests/reference/ac_power_flow.py (timed inside Python over the same
/// number of repetitions, its admittance matrix built once beforehand). Agreement: the loss's
/// relative difference (the case's main figure) and the largest bus-voltage difference in pu.
/// </summary>
internal sealed class PowerFlowVersusCase(int buses) : IVersusCase
{
    private const string Python = "/usr/bin/python3";

    /// <summary>The power-flow cases: 33 (Baran &amp; Wu), 330 and 1650 buses (generated, seed 1).</summary>
    public static IEnumerable<IVersusCase> All() => [new PowerFlowVersusCase(33), new PowerFlowVersusCase(330), new PowerFlowVersusCase(1650)];

    public string Name => $"powerflow-{buses}";

    public VersusResult Run(int repetitions)
    {
        Feeder feeder = BenchFeeders.ForBusCount(buses);
        var net = feeder.Network;
        var flow = new AcPowerFlow(net);
        var result = new PowerFlowResult(net.BusCount);
        for (int i = 0; i < Math.Max(20, repetitions / 5); i++) flow.Solve(net.LoadP, net.LoadQ, result);
        var times = new double[repetitions];
        for (int i = 0; i < repetitions; i++)
        {
            long t0 = Stopwatch.GetTimestamp();
            flow.Solve(net.LoadP, net.LoadQ, result);
            times[i] = Stopwatch.GetElapsedTime(t0).TotalMilliseconds;
        }
        double ours = Median(times);
        double ourLossKw = net.ToKw(result.LossPu);

        string path = Path.Combine(Path.GetTempPath(), $"fedgrid-versus-{buses}-{Environment.ProcessId}.json");
        try
        {
            FeederFile.Write(feeder, path);
            var psi = new ProcessStartInfo(Python) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
            psi.ArgumentList.Add(RepoFiles.PowerFlowReferenceScript);
            psi.ArgumentList.Add(path);
            psi.ArgumentList.Add("--repeat");
            psi.ArgumentList.Add(repetitions.ToString(CultureInfo.InvariantCulture));
            using var p = Process.Start(psi) ?? throw new InvalidOperationException($"cannot start {Python}");
            Task<string> stdout = p.StandardOutput.ReadToEndAsync();
            Task<string> stderr = p.StandardError.ReadToEndAsync();
            p.WaitForExit();
            if (p.ExitCode != 0)
                throw new InvalidOperationException($"SciPy reference failed (exit {p.ExitCode}); run `bash tests/run.sh` to install python3-scipy. {stderr.Result}");
            using JsonDocument doc = JsonDocument.Parse(stdout.Result);
            JsonElement root = doc.RootElement;
            double maxDv = 0;
            foreach (JsonElement b in root.GetProperty("buses").EnumerateArray())
            {
                int i = feeder.IndexOf(b.GetProperty("id").GetString()!);
                maxDv = Math.Max(maxDv, Math.Abs(result.VoltagePu[i] - b.GetProperty("vmPu").GetDouble()));
            }
            double refLoss = root.GetProperty("lossKw").GetDouble();
            var extra = new Dictionary<string, double>
            {
                ["buses"] = buses,
                ["maxVoltageDiffPu"] = maxDv,
                ["oursLossKw"] = ourLossKw,
                ["referenceLossKw"] = refLoss,
                ["oursIterations"] = result.Iterations,
                ["referenceIterations"] = root.GetProperty("iterations").GetInt32(),
                ["repetitions"] = repetitions,
            };
            return new VersusResult(Name, ours, root.GetProperty("medianMs").GetDouble(), Math.Abs(ourLossKw - refLoss) / Math.Abs(refLoss), extra);
        }
        finally
        {
            File.Delete(path);
        }
    }

    private static double Median(double[] xs)
    {
        Array.Sort(xs);
        int n = xs.Length;
        return n % 2 == 1 ? xs[n / 2] : 0.5 * (xs[n / 2 - 1] + xs[n / 2]);
    }
}
