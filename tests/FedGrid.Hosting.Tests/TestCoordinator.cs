using System.Net;
using FedGrid.Hosting;
using Grpc.Net.Client;
using Microsoft.AspNetCore.Builder;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Logging.Abstractions;

namespace FedGrid.Hosting.Tests;

/// <summary>A live coordinator host inside the test process, on a free loopback port, with its log lines collected.</summary>
internal sealed class TestCoordinator : IAsyncDisposable
{
    private readonly WebApplication _app;
    private readonly TaskCompletionSource<int> _port = new(TaskCreationOptions.RunContinuationsAsynchronously);
    private readonly CancellationTokenSource _cancel = new();

    private TestCoordinator(HostedRunSettings run, TimeSpan roundTimeout, string? tls, TimeSpan? stepTimeout, string? transcript,
        Func<CoordinatorHostOptions, CoordinatorHostOptions>? adjust, int port)
    {
        var options = new CoordinatorHostOptions { Run = run, RoundTimeout = roundTimeout, StepTimeout = stepTimeout, TranscriptPath = transcript };
        _app = CoordinatorHost.Build(adjust is null ? options : adjust(options), IPAddress.Loopback, port, tlsFolder: tls,
            logging: b => { b.ClearProviders(); b.AddProvider(new ListLogger(Lines)); });
        Run = CoordinatorHost.RunAsync(_app, p => _port.TrySetResult(p), _cancel.Token, stopWhenDone: false);
        _ = Run.ContinueWith(t => _port.TrySetException(t.Exception ?? new Exception("coordinator ended before listening")), TaskContinuationOptions.NotOnRanToCompletion);
    }

    public List<string> Lines { get; } = [];

    public Task<CoordinatorOutcome> Run { get; }

    public Uri Address { get; private set; } = null!;

    /// <summary>Starts a coordinator; <paramref name="adjust"/> changes its options (state folder, resume, fault injection), <paramref name="port"/> 0 for any free port.</summary>
    public static async Task<TestCoordinator> StartAsync(HostedRunSettings run, TimeSpan? roundTimeout = null, string? tls = null,
        TimeSpan? stepTimeout = null, string? transcript = null, Func<CoordinatorHostOptions, CoordinatorHostOptions>? adjust = null, int port = 0)
    {
        var c = new TestCoordinator(run, roundTimeout ?? TimeSpan.FromSeconds(30), tls, stepTimeout, transcript, adjust, port);
        int bound = await c._port.Task.WaitAsync(TimeSpan.FromSeconds(30));
        c.Address = new Uri($"{(tls is null ? "http" : "https")}://127.0.0.1:{bound}");
        return c;
    }

    public GrpcChannel Channel() => GrpcChannel.ForAddress(Address, new GrpcChannelOptions { MaxSendMessageSize = null, MaxReceiveMessageSize = null });

    /// <summary>
    /// Runs every household of <paramref name="run"/> in this process against this coordinator and cuts household
    /// <paramref name="leaving"/>'s connection once the run has reached step <paramref name="step"/>.
    /// </summary>
    /// <returns>The households' tasks, in household order.</returns>
    public async Task<Task[]> RunHouseholdsOneLeavingAt(HostedRunSettings run, string leaving, long step)
    {
        var leave = new CancellationTokenSource();
        Task[] hosts = run.CreateScenario().Households
            .Select(h => Task.Run(() => new HouseholdHost(run, h.Id, NullLogger.Instance).RunAsync(Address, h.Id == leaving ? leave.Token : CancellationToken.None))).ToArray();
        await WaitForStep(step);
        await leave.CancelAsync(); // the household's connection drops mid-run
        _ = Task.WhenAll(hosts).ContinueWith(_ => leave.Dispose(), TaskScheduler.Default); // the leaving host holds its token until it ends
        return hosts;
    }

    /// <summary>Waits until the run has reached <paramref name="step"/>; fails (naming the log) when the run ends first or within 3 minutes does not get there.</summary>
    public Task WaitForStep(long step) => WaitUntil(s => s.Step >= step, $"step {step}");

    /// <summary>Polls the coordinator's status (<see cref="StatusPoll"/>) until <paramref name="reached"/>; fails (naming <paramref name="what"/> and the log) when the run ends first or 3 minutes pass.</summary>
    public async Task WaitUntil(Func<FedGrid.Hosting.Wire.RunStatus, bool> reached, string what)
    {
        using var channel = Channel();
        await StatusPoll.Until(channel, reached, () => Run.IsCompleted, TimeSpan.FromMinutes(3),
            ended => $"the run {(ended ? "ended" : "is still going")} without reaching {what}", () => "its log:\n" + string.Join("\n", Snapshot()));
    }

    /// <summary>
    /// The end of a run in which household <paramref name="left"/> left for good: the run completes all
    /// <paramref name="steps"/>, the leaving host ends with an error, every other host finishes. Returns the outcome and
    /// the leaving host's error.
    /// </summary>
    public async Task<(CoordinatorOutcome Outcome, Exception Left)> CompletesWithout(Task[] hosts, int left, int steps, TimeSpan within)
    {
        CoordinatorOutcome outcome = await Run.WaitAsync(within);
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(steps, outcome.Steps);
        Exception error = await EndsWithError(hosts[left], TimeSpan.FromMinutes(1));
        await Task.WhenAll(hosts.Where((_, i) => i != left)).WaitAsync(TimeSpan.FromMinutes(1));
        return (outcome, error);
    }

    /// <summary>
    /// The exception a household host's run ended with: fails when it ends normally or is still running after
    /// <paramref name="within"/> (a stuck host fails the test instead of holding the suite).
    /// </summary>
    public static async Task<Exception> EndsWithError(Task host, TimeSpan within)
    {
        Exception? e = await Record.ExceptionAsync(() => host.WaitAsync(within));
        Assert.NotNull(e);
        Assert.False(e is TimeoutException && !host.IsCompleted, $"the household host was still running after {within.TotalSeconds:0} s");
        return e;
    }

    private List<string> Snapshot()
    {
        lock (Lines)
        {
            return [.. Lines];
        }
    }

    public bool Logged(string text)
    {
        lock (Lines)
        {
            return Lines.Any(l => l.Contains(text, StringComparison.Ordinal));
        }
    }

    public async ValueTask DisposeAsync()
    {
        await _cancel.CancelAsync();
        try
        {
            await Run.WaitAsync(TimeSpan.FromSeconds(30));
        }
        catch (Exception)
        {
            // a test that failed early
        }
        using var grace = new CancellationTokenSource(TimeSpan.FromSeconds(5));
        await _app.StopAsync(grace.Token);
        await _app.DisposeAsync();
        _cancel.Dispose();
    }

    private sealed class ListLogger(List<string> lines) : ILoggerProvider, ILogger
    {
        public ILogger CreateLogger(string categoryName) => this;

        public IDisposable? BeginScope<TState>(TState state) where TState : notnull => null;

        public bool IsEnabled(LogLevel logLevel) => logLevel >= LogLevel.Information;

        public void Log<TState>(LogLevel logLevel, EventId eventId, TState state, Exception? exception, Func<TState, Exception?, string> formatter)
        {
            lock (lines)
            {
                lines.Add($"{logLevel}: {formatter(state, exception)}");
            }
        }

        public void Dispose()
        {
        }
    }
}
