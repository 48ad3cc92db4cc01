namespace FedGrid.Hosting.Tests;

/// <summary>A test's run of real processes: a fresh run folder, a free loopback port for the coordinator and the
/// processes started; disposing ends the processes and deletes the folder.</summary>
internal sealed class ProcessRun : IDisposable
{
    private readonly List<HostProcess> _all = [];

    /// <summary>Creates the run folder (a temporary directory named from <paramref name="prefix"/>) and picks the port.</summary>
    public ProcessRun(string prefix)
    {
        Folder = Directory.CreateTempSubdirectory(prefix).FullName;
        Port = Launcher.FreeLoopbackPort();
        Address = $"http://127.0.0.1:{Port}";
    }

    public string Folder { get; }

    public int Port { get; }

    /// <summary>The coordinator's plain-text loopback address on <see cref="Port"/>.</summary>
    public string Address { get; }

    /// <summary>Starts a process and keeps it for <see cref="Output"/> and disposal.</summary>
    public HostProcess Start(string name, IEnumerable<string> args)
    {
        var p = HostProcess.Start(name, args);
        _all.Add(p);
        return p;
    }

    /// <summary>Polls the coordinator's status on <see cref="Address"/> until its step reaches <paramref name="step"/>.
    /// A refused or failed poll is retried while the coordinator lives (it may not take connections yet); the test
    /// fails with every process's output when the coordinator exits first or <paramref name="limit"/> passes.</summary>
    public async Task WaitForStep(HostProcess coordinator, long step, TimeSpan limit)
    {
        using var channel = Grpc.Net.Client.GrpcChannel.ForAddress(Address);
        await StatusPoll.Until(channel, s => s.Step >= step, () => coordinator.HasExited, limit,
            exited => $"{coordinator.Name} did not reach step {step} ({(exited ? "exited" : $"{limit.TotalSeconds:0} s passed")})", Output);
    }

    /// <summary>Every process's output, for a failure message.</summary>
    public string Output() => string.Join("\n", _all.Select(p => p.Output()));

    public void Dispose()
    {
        foreach (HostProcess p in _all) p.Dispose();
        Directory.Delete(Folder, recursive: true);
    }
}
