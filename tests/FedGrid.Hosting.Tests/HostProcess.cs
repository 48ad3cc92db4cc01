using System.Diagnostics;

namespace FedGrid.Hosting.Tests;

/// <summary>One <c>fedgrid</c> process (coordinator or household) started by a test, its output lines collected.</summary>
internal sealed class HostProcess : IDisposable
{
    private readonly Process _p;
    private readonly List<string> _lines = [];

    private HostProcess(string name, IEnumerable<string> prefix, IEnumerable<string> args)
    {
        Name = name;
        _p = new Process { StartInfo = CliRun.StartInfo(prefix, args) };
        DataReceivedEventHandler add = (_, e) =>
        {
            if (e.Data is not null)
            {
                lock (_lines)
                {
                    _lines.Add(e.Data);
                }
            }
        };
        _p.OutputDataReceived += add;
        _p.ErrorDataReceived += add;
        _p.Start();
        _p.BeginOutputReadLine();
        _p.BeginErrorReadLine();
    }

    public string Name { get; }

    public int ExitCode => _p.ExitCode;

    public bool HasExited => _p.HasExited;

    /// <summary>Starts <c>dotnet fedgrid.dll args</c>, optionally under a wrapper (e.g. <c>ip netns exec NS</c>).</summary>
    public static HostProcess Start(string name, IEnumerable<string> args, IEnumerable<string>? wrapper = null) => new(name, wrapper ?? [], args);

    public string Output()
    {
        lock (_lines)
        {
            return $"--- {Name} ---\n" + string.Join("\n", _lines);
        }
    }

    /// <summary>The first line containing <paramref name="text"/>, or null.</summary>
    public string? Line(string text)
    {
        lock (_lines)
        {
            return _lines.FirstOrDefault(l => l.Contains(text, StringComparison.Ordinal));
        }
    }

    public bool Logged(string text)
    {
        lock (_lines)
        {
            return _lines.Any(l => l.Contains(text, StringComparison.Ordinal));
        }
    }

    /// <summary>Waits until a line contains <paramref name="text"/>; fails when the process exits first or the time runs out.</summary>
    public async Task WaitForLine(string text, TimeSpan limit)
    {
        var watch = Stopwatch.StartNew();
        while (!Logged(text))
        {
            if (_p.HasExited)
            {
                await Task.Delay(200); // the last lines
                if (Logged(text)) return;
                throw new InvalidOperationException($"{Name} exited ({_p.ExitCode}) before logging '{text}'\n{Output()}");
            }
            if (watch.Elapsed > limit)
            {
                throw new TimeoutException($"{Name} did not log '{text}' within {limit.TotalSeconds:0} s\n{Output()}");
            }
            await Task.Delay(50);
        }
    }

    public async Task<int> WaitForExit(TimeSpan limit)
    {
        await _p.WaitForExitAsync().WaitAsync(limit); // the exit and the end of its output
        _p.WaitForExit(TimeSpan.FromSeconds(10));
        return _p.ExitCode;
    }

    /// <summary>Sends a signal by name (e.g. STOP, CONT) with kill(1).</summary>
    public void Signal(string name)
    {
        using Process kill = Process.Start("kill", ["-s", name, _p.Id.ToString(System.Globalization.CultureInfo.InvariantCulture)]);
        kill.WaitForExit();
        if (kill.ExitCode != 0)
        {
            throw new InvalidOperationException($"kill -s {name} {_p.Id} exited with {kill.ExitCode}");
        }
    }

    /// <summary>SIGKILL (no clean-up of any kind in the process).</summary>
    public void Kill()
    {
        if (!_p.HasExited)
        {
            _p.Kill(entireProcessTree: true);
            _p.WaitForExit(TimeSpan.FromSeconds(30)); // bounded: a pipe held open elsewhere must not hold the suite
        }
    }

    public void Dispose()
    {
        try
        {
            Kill();
        }
        catch (InvalidOperationException)
        {
            // never started or already reaped
        }
        _p.Dispose();
    }
}
