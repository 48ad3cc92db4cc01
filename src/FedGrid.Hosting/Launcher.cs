using System.Diagnostics;
using System.Globalization;
using System.Net;
using System.Net.Sockets;
using System.Text.Json;

namespace FedGrid.Hosting;

/// <summary>What <see cref="Launcher"/> measured.</summary>
/// <param name="Processes">OS processes started (one coordinator and N households).</param>
/// <param name="Outcome">The coordinator's outcome.</param>
/// <param name="InProcessModelSha256">Hex SHA-256 of the same run's final model in one process.</param>
/// <param name="InProcessStepsPerSecond">Decision steps per second of that in-process run (its whole wall time).</param>
public sealed record LaunchReport(int Processes, CoordinatorOutcome Outcome, string InProcessModelSha256, double InProcessStepsPerSecond)
{
    /// <summary>Multi-process steps per second over in-process steps per second.</summary>
    public double RatioToInProcess => InProcessStepsPerSecond > 0 ? Outcome.StepsPerSecond / InProcessStepsPerSecond : 0;

    /// <summary>Whether the multi-process model equals the in-process model bit for bit.</summary>
    public bool MatchesInProcess => Outcome.Ok && string.Equals(Outcome.ModelSha256, InProcessModelSha256, StringComparison.Ordinal);
}

/// <summary>
/// Starts one coordinator process and one process per household (the <c>fedgrid</c> executable itself) on loopback,
/// waits for the run, reads the coordinator's result file, and stops every child — also when cancelled (Ctrl+C) or when
/// a child fails. Then runs the same settings in one process for the comparison.
/// </summary>
public static class Launcher
{
    /// <summary>
    /// Runtime settings the launcher gives each child process (environment variables of the .NET runtime), unless the
    /// launcher's own environment already sets the variable (then the child inherits that value). A launched run is 33
    /// short-lived processes on a few cores, each running its per-step code a few hundred times:
    /// <list type="bullet">
    /// <item><c>DOTNET_TieredCompilation=0</c>: every method is compiled optimised at its first call. With tiering each
    /// process ran its hot path (protobuf, gRPC, the agent) as unoptimised tier-0 code and then recompiled it, in every
    /// process separately, for most of a one-day run; measured on 8 households, the children's CPU per decision step
    /// fell from ≈ 55 ms to ≈ 19 ms, at ≈ 30 % more start-up CPU (not in the run's clock).</item>
    /// <item><c>DOTNET_ThreadPool_UnfairSemaphoreSpinLimit=0</c>: an idle thread-pool worker sleeps at once instead of
    /// spinning; with many processes per core a spinning worker takes the core from the process that has a message to
    /// handle (involuntary context switches of the children fell by ≈ 75 %).</item>
    /// <item><c>DOTNET_gcConcurrent=0</c>: no background GC thread per process (the heaps are small; a blocking gen-0/1
    /// collection is short).</item>
    /// </list>
    /// The results do not depend on them (same bits); only time does.
    /// </summary>
    public static IReadOnlyDictionary<string, string> ChildRuntimeSettings { get; } = new Dictionary<string, string>(StringComparer.Ordinal)
    {
        ["DOTNET_TieredCompilation"] = "0",
        ["DOTNET_ThreadPool_UnfairSemaphoreSpinLimit"] = "0",
        ["DOTNET_gcConcurrent"] = "0",
    };

    /// <summary>Runs the launch.</summary>
    /// <param name="run">The run.</param>
    /// <param name="self">Command that starts <c>fedgrid</c> (the executable, or <c>dotnet</c> and the dll).</param>
    /// <param name="progress">Progress lines (children's output included).</param>
    /// <param name="cancel">Stops everything.</param>
    /// <param name="insecureLoopback">Plain text on loopback instead of mutual TLS with a fresh scenario CA.</param>
    /// <param name="stepTimeout">The coordinator's <c>--step-timeout</c> (drop households whose step messages miss it), or null to wait for all.</param>
    /// <param name="stateFolder">Run folder for checkpoints (<c>--state</c>): the coordinator's in <c>coordinator/</c>, each household's in <c>&lt;id&gt;/</c>; kept after the launch. Null for none.</param>
    /// <returns>The report.</returns>
    public static async Task<LaunchReport> RunAsync(HostedRunSettings run, IReadOnlyList<string> self, TextWriter progress, CancellationToken cancel, bool insecureLoopback = false,
        TimeSpan? stepTimeout = null, string? stateFolder = null)
    {
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(self);
        ArgumentNullException.ThrowIfNull(progress);
        if (stateFolder is not null)
        {
            run.RequireCheckpointable();
        }
        var scenario = run.CreateScenario();
        string folder = Directory.CreateTempSubdirectory("fedgrid-launch-").FullName;
        string result = Path.Combine(folder, "coordinator.json");
        int port = FreeLoopbackPort();
        string tls = Path.Combine(folder, "tls");
        string[] transport = insecureLoopback ? ["--insecure-loopback"] : ["--tls", tls];
        if (!insecureLoopback)
        {
            ScenarioCertificates.Create(tls, scenario.Households.Select(h => h.Id));
        }
        var children = new List<Process>();
        try
        {
            Process coordinator = Start(self, CoordinatorArguments(run, port, transport, result, stepTimeout, stateFolder), "coordinator", progress);
            children.Add(coordinator);
            await WaitListening(port, coordinator, cancel);
            var address = $"{(insecureLoopback ? "http" : "https")}://127.0.0.1:{port}";
            foreach (var h in scenario.Households)
            {
                children.Add(Start(self, HouseholdArguments(run, h.Id, address, transport, stateFolder), h.Id, progress));
            }
            progress.WriteLine($"launch: coordinator on {address} and {scenario.Households.Length} household processes ({(insecureLoopback ? "plain text on loopback" : "mutual TLS, scenario CA in " + tls)})");
            // The run ends when the coordinator exits; a household that fails first ends it too.
            Task coordinatorExit = coordinator.WaitForExitAsync(cancel);
            Task firstHouseholdFailure = Task.WhenAll(children.Skip(1).Select(async p =>
            {
                await p.WaitForExitAsync(cancel);
                if (p.ExitCode != 0)
                {
                    throw new InvalidOperationException($"household process {p.Id} exited with code {p.ExitCode}");
                }
            }));
            Task first = await Task.WhenAny(coordinatorExit, firstHouseholdFailure);
            await first; // cancellation or a household failure surfaces here
            await coordinatorExit;
            if (coordinator.ExitCode != 0 || !File.Exists(result))
            {
                throw new InvalidOperationException($"coordinator exited with code {coordinator.ExitCode}");
            }
            using (var grace = CancellationTokenSource.CreateLinkedTokenSource(cancel))
            {
                grace.CancelAfter(TimeSpan.FromSeconds(30));
                await firstHouseholdFailure.WaitAsync(grace.Token);
            }
            CoordinatorOutcome outcome = ReadOutcome(result);
            progress.WriteLine("launch: the same run in one process for comparison");
            var (sha, inProcess) = run.RunInProcess();
            return new LaunchReport(children.Count, outcome, Convert.ToHexStringLower(sha), inProcess.Run.DecisionSteps / inProcess.Run.Elapsed.TotalSeconds);
        }
        finally
        {
            foreach (Process p in children)
            {
                try
                {
                    if (!p.HasExited)
                    {
                        p.Kill(entireProcessTree: true);
                    }
                }
                catch (InvalidOperationException)
                {
                    // already gone
                }
                p.Dispose();
            }
            try
            {
                Directory.Delete(folder, recursive: true);
            }
            catch (IOException)
            {
                // left for the OS to clean
            }
        }
    }

    /// <summary>The coordinator process's arguments in a launch.</summary>
    /// <param name="run">The run.</param>
    /// <param name="port">Loopback port.</param>
    /// <param name="transport"><c>--tls DIR</c> or <c>--insecure-loopback</c>.</param>
    /// <param name="result">Its result file.</param>
    /// <param name="stepTimeout">Its <c>--step-timeout</c>, or null.</param>
    /// <param name="stateFolder">The launch's run folder (the coordinator's checkpoints go in its <c>coordinator/</c>), or null.</param>
    /// <returns>Arguments after the executable.</returns>
    public static IReadOnlyList<string> CoordinatorArguments(HostedRunSettings run, int port, IReadOnlyList<string> transport, string result, TimeSpan? stepTimeout, string? stateFolder)
    {
        ArgumentNullException.ThrowIfNull(run);
        var args = new List<string> { "coordinator" };
        args.AddRange(run.ToArguments());
        args.AddRange(["--port", port.ToString(CultureInfo.InvariantCulture)]);
        args.AddRange(transport);
        args.AddRange(["--result", result]);
        if (stepTimeout is { } t)
        {
            args.AddRange(["--step-timeout", t.TotalSeconds.ToString("R", CultureInfo.InvariantCulture)]);
        }
        if (stateFolder is not null)
        {
            args.AddRange(["--state", Path.Combine(stateFolder, "coordinator")]);
        }
        return args;
    }

    /// <summary>A household process's arguments in a launch.</summary>
    /// <param name="run">The run.</param>
    /// <param name="id">The household's id.</param>
    /// <param name="address">The coordinator's address.</param>
    /// <param name="transport"><c>--tls DIR</c> or <c>--insecure-loopback</c>.</param>
    /// <param name="stateFolder">The launch's run folder (the household's checkpoints go in its <c>&lt;id&gt;/</c>), or null.</param>
    /// <returns>Arguments after the executable.</returns>
    public static IReadOnlyList<string> HouseholdArguments(HostedRunSettings run, string id, string address, IReadOnlyList<string> transport, string? stateFolder)
    {
        ArgumentNullException.ThrowIfNull(run);
        var args = new List<string> { "household" };
        args.AddRange(run.ToArguments());
        args.AddRange(["--id", id, "--coordinator", address]);
        args.AddRange(transport);
        if (stateFolder is not null)
        {
            args.AddRange(["--state", Path.Combine(stateFolder, id)]);
        }
        return args;
    }

    /// <summary>A loopback TCP port that was free a moment ago.</summary>
    /// <returns>The port.</returns>
    public static int FreeLoopbackPort()
    {
        using var l = new TcpListener(IPAddress.Loopback, 0);
        l.Start();
        int port = ((IPEndPoint)l.LocalEndpoint).Port;
        l.Stop();
        return port;
    }

    /// <summary>Writes a coordinator outcome as JSON (the coordinator's <c>--result</c> file).</summary>
    /// <param name="outcome">The outcome.</param>
    /// <param name="path">File.</param>
    public static void WriteOutcome(CoordinatorOutcome outcome, string path)
    {
        ArgumentNullException.ThrowIfNull(outcome);
        string tmp = path + ".tmp";
        using (var stream = File.Create(tmp))
        using (var w = new Utf8JsonWriter(stream, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteBoolean("ok", outcome.Ok);
            w.WriteString("error", outcome.Error);
            w.WriteNumber("rounds", outcome.Rounds);
            w.WriteNumber("aggregatedRounds", outcome.AggregatedRounds);
            w.WriteNumber("failedRounds", outcome.FailedRounds);
            w.WriteNumber("steps", outcome.Steps);
            w.WriteNumber("households", outcome.Households);
            w.WriteString("modelSha256", outcome.ModelSha256);
            w.WriteNumber("runSeconds", outcome.RunSeconds);
            w.WriteNumber("wireBytes", outcome.WireBytes);
            w.WriteEndObject();
        }
        File.Move(tmp, path, overwrite: true);
    }

    /// <summary>Reads a file of <see cref="WriteOutcome"/>.</summary>
    /// <param name="path">File.</param>
    /// <returns>The outcome.</returns>
    public static CoordinatorOutcome ReadOutcome(string path)
    {
        using JsonDocument d = JsonDocument.Parse(File.ReadAllBytes(path));
        JsonElement r = d.RootElement;
        return new CoordinatorOutcome(r.GetProperty("ok").GetBoolean(), r.GetProperty("error").GetString(), r.GetProperty("rounds").GetInt32(),
            r.GetProperty("aggregatedRounds").GetInt32(), r.GetProperty("failedRounds").GetInt32(), r.GetProperty("steps").GetInt64(),
            r.GetProperty("households").GetInt32(), r.GetProperty("modelSha256").GetString() ?? "", r.GetProperty("runSeconds").GetDouble(),
            r.GetProperty("wireBytes").GetInt64());
    }

    private static Process Start(IReadOnlyList<string> self, IEnumerable<string> args, string name, TextWriter progress)
    {
        var info = new ProcessStartInfo(self[0]) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        foreach ((string variable, string value) in ChildRuntimeSettings)
        {
            if (Environment.GetEnvironmentVariable(variable) is null)
            {
                info.Environment[variable] = value;
            }
        }
        foreach (string a in self.Skip(1).Concat(args))
        {
            info.ArgumentList.Add(a);
        }
        var p = new Process { StartInfo = info };
        DataReceivedEventHandler forward = (_, e) =>
        {
            if (e.Data is not null)
            {
                lock (progress)
                {
                    progress.WriteLine($"[{name}] {e.Data}");
                }
            }
        };
        p.OutputDataReceived += forward;
        p.ErrorDataReceived += forward;
        p.Start();
        p.BeginOutputReadLine();
        p.BeginErrorReadLine();
        return p;
    }

    private static async Task WaitListening(int port, Process coordinator, CancellationToken cancel)
    {
        var deadline = Stopwatch.StartNew();
        while (deadline.Elapsed < TimeSpan.FromSeconds(60))
        {
            cancel.ThrowIfCancellationRequested();
            if (coordinator.HasExited)
            {
                throw new InvalidOperationException($"coordinator exited with code {coordinator.ExitCode} before listening");
            }
            try
            {
                using var c = new TcpClient();
                await c.ConnectAsync(IPAddress.Loopback, port, cancel);
                return;
            }
            catch (SocketException)
            {
                await Task.Delay(100, cancel);
            }
        }
        throw new TimeoutException($"coordinator did not listen on port {port} within 60 s");
    }
}
