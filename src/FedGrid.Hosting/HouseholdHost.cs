using FedGrid.Federation.Households;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Training;
using FedGrid.Federation.Wire;
using FedGrid.Hosting.Wire;
using FedGrid.Households.Scenarios;
using System.Net.Security;
using System.Security.Cryptography.X509Certificates;
using Google.Protobuf;
using Grpc.Core;
using Grpc.Net.Client;
using Microsoft.Extensions.Logging;

namespace FedGrid.Hosting;

/// <summary>
/// The household process (a home gateway): its own <see cref="HouseholdAgent"/> and its own slice of the world (a
/// one-household <see cref="HouseholdControlTask"/> built from the scenario, the seed and its id — no other household's
/// data), connected to the coordinator by one <c>Session</c> stream. The loop is the in-process runner's, seen from
/// one household: begin a step (partial sums), answer the sums (projection inputs), apply the setpoint to the world and
/// report the cost, at a round's end train when called and wait for the broadcast.
/// <para>
/// With a <see cref="StateFolder"/> the household checkpoints its own state at every round end (when the training call
/// arrives, before it trains): its agent, the setpoints it applied (its world is replayed from them) and the call. A
/// broken stream is retried with backoff; every connection joins afresh, and when the coordinator answers with the
/// model of a round R &gt; 0 (a rejoin) the household restores its checkpoint of round R − 1, trains as it did then
/// (the upload is not resent: the round is closed) and continues with the model of round R.
/// </para>
/// </summary>
public sealed class HouseholdHost
{
    private const int KeptCheckpoints = 2;
    private readonly HostedRunSettings _run;
    private readonly string _id;
    private readonly ILogger _log;
    private readonly Scenario _own;
    private readonly FederatedRunOptions _options;
    private readonly float[] _state = new float[HouseholdControlTask.FeaturesPerHousehold];
    private readonly float[] _action = new float[1], _cost = new float[1];
    private readonly List<float> _applied = [];
    private HouseholdAgent _agent;
    private HouseholdControlTask _world;
    private JoinAccepted? _accepted;
    private long _step;
    private bool _everAdmitted, _dropped, _stalled;

    /// <summary>Derives the household's own data.</summary>
    /// <param name="run">The run.</param>
    /// <param name="householdId">The household's id.</param>
    /// <param name="log">Logger.</param>
    /// <exception cref="ArgumentException">The id is not among the run's households.</exception>
    public HouseholdHost(HostedRunSettings run, string householdId, ILogger log)
    {
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(log);
        _run = run;
        _id = householdId;
        _log = log;
        Scenario full = run.CreateScenario();
        (int index, _own) = HostedRunSettings.OwnView(full, householdId);
        Index = index;
        _options = run.CreateRunOptions();
        (_agent, _world) = Fresh();
    }

    /// <summary>The household's block index in the scenario.</summary>
    public int Index { get; }

    /// <summary>Decision steps done.</summary>
    public long Steps => _step;

    /// <summary>Folder of the household's own round-end checkpoints, or null for none (then a lost connection after round 0 cannot be resumed).</summary>
    public string? StateFolder { get; init; }

    /// <summary>How long the household keeps trying to reach the coordinator without progress before it gives up.</summary>
    public TimeSpan ReconnectWindow { get; init; } = TimeSpan.FromMinutes(5);

    /// <summary>Fault injection for tests: in this round, after the checkpoint, the household holds its upload (as a gateway that hangs while training) until it is stopped; −1 for never.</summary>
    public int HoldUploadInRound { get; init; } = -1;

    /// <summary>Fault injection for tests: ends the hold of <see cref="HoldUploadInRound"/> when it completes (null: held until stopped), as a gateway frozen at a round end and continued.</summary>
    public Task? HoldUploadRelease { get; init; }

    /// <summary>Rejoins after a lost connection (restores from its checkpoint).</summary>
    public int Rejoins { get; private set; }

    /// <summary>Rejoins after the coordinator dropped the household at a step deadline (it kept its state).</summary>
    public int DropoutRejoins { get; private set; }

    /// <summary>Fault injection for tests: before this decision step the household sends nothing (a gateway that stalls) until the coordinator drops it at the step deadline; −1 for never.</summary>
    public long StallBeforeStep { get; init; } = -1;

    /// <summary>Fault injection for tests: before this decision step the household drops its connection at once and ends its run with an <see cref="OperationCanceledException"/> (a gateway switched off for good); −1 for never.</summary>
    public long LeaveBeforeStep { get; init; } = -1;

    /// <summary>Fault injection for tests: after the drop of <see cref="StallBeforeStep"/> the household waits for this task before it rejoins (null: at once).</summary>
    public Task? StallRelease { get; init; }

    private (HouseholdAgent Agent, HouseholdControlTask World) Fresh()
    {
        var world = new HouseholdControlTask(_own, new HouseholdTaskOptions(Project: false));
        world.Reset(_options.Federation.Learning.Seed);
        Federation.Households.HouseholdIdentity identity = new(_own.Households[0].Id, _own.Households[0].BusId, _own.Households[0].KvarPerKw, HouseholdControlTask.FeaturesPerHousehold);
        var agent = new HouseholdAgent(identity, _options.Federation, _options.Scheme!, InProcessFederation.HouseholdSeed(_options.Federation, Index),
            _options.ProjectionForm ?? new HouseholdProjectionInputs());
        return (agent, world);
    }

    /// <summary>Joins the coordinator at <paramref name="address"/> and runs every step of the scenario, reconnecting with backoff when the stream breaks.</summary>
    /// <param name="address">The coordinator, e.g. http://127.0.0.1:5000.</param>
    /// <param name="cancel">Stops the run.</param>
    /// <param name="tlsFolder">Folder holding <c>ca.crt</c> and this household's <c>&lt;id&gt;.pfx</c> for mutual TLS (an https address), or null for plain text.</param>
    public async Task RunAsync(Uri address, CancellationToken cancel, string? tlsFolder = null)
    {
        ArgumentNullException.ThrowIfNull(address);
        if (StateFolder is not null)
        {
            _run.RequireCheckpointable();
        }
        // A restarted household that holds checkpoints was admitted before: it reconnects like one.
        _everAdmitted |= StateFolder is not null && Directory.Exists(StateFolder) && Directory.EnumerateFiles(StateFolder, _id + ".round-*.ckpt").Any();
        var sinceProgress = System.Diagnostics.Stopwatch.StartNew();
        long progressMark = 0;
        for (int attempt = 1; ; attempt++)
        {
            try
            {
                await RunOnceAsync(address, cancel, tlsFolder);
                return;
            }
            catch (RpcException e) when (!cancel.IsCancellationRequested && DropNotice(e) is { } notice)
            {
                // Dropped at a step deadline (e.g. the gateway stalled): it keeps its agent and world and comes back with a
                // rejoin request; the coordinator takes it at a round start.
                _dropped = true;
                _log.LogWarning("household '{Id}': dropped by the coordinator at a step deadline (round,step {Notice}); rejoining at a round start", _id, notice);
                if (_stalled && StallRelease is { } release)
                {
                    await release.WaitAsync(cancel);
                }
                sinceProgress.Restart();
                attempt = 0;
            }
            // Before the first admission only UNAVAILABLE is retried, 10 times (the coordinator not up yet, a handshake
            // lost on a busy machine); a household that was admitted keeps reconnecting within the window.
            catch (Exception e) when (Retryable(e, cancel, _everAdmitted) && (_everAdmitted || attempt < 10))
            {
                if (_step != progressMark)
                {
                    progressMark = _step;
                    sinceProgress.Restart();
                    attempt = 1;
                }
                if (sinceProgress.Elapsed > ReconnectWindow)
                {
                    throw new TimeoutException($"household '{_id}': no progress for {ReconnectWindow.TotalSeconds:0} s of reconnecting; last error: {e.Message}", e);
                }
                var delay = TimeSpan.FromMilliseconds(Math.Min(5000, 200 * (1 << Math.Min(attempt - 1, 5))));
                _log.LogWarning("household '{Id}': connection lost or refused ({Detail}); retry {Attempt} in {Delay:0.0} s", _id,
                    e is RpcException r ? $"{r.StatusCode}: {r.Status.Detail}" : e.Message, attempt, delay.TotalSeconds);
                await Task.Delay(delay, cancel);
            }
        }
    }

    /// <summary>The coordinator's drop notice (ABORTED with the <see cref="CoordinatorEngine.DroppedTrailer"/> trailer), or null.</summary>
    private static string? DropNotice(RpcException e) =>
        e.StatusCode == StatusCode.Aborted && e.Trailers.Get(CoordinatorEngine.DroppedTrailer) is { } entry ? entry.Value : null;

    private static bool Retryable(Exception e, CancellationToken cancel, bool admitted) => !cancel.IsCancellationRequested && e switch
    {
        RpcException r when !admitted => r.StatusCode == StatusCode.Unavailable,
        _ when !admitted => false,
        RpcException r => r.StatusCode is StatusCode.Unavailable or StatusCode.Internal or StatusCode.Unknown or StatusCode.AlreadyExists
            or StatusCode.Cancelled or StatusCode.Aborted or StatusCode.DeadlineExceeded,
        HttpRequestException or IOException => true,
        _ => false,
    };

    private async Task RunOnceAsync(Uri address, CancellationToken cancel, string? tlsFolder)
    {
        using var handler = new SocketsHttpHandler { EnableMultipleHttp2Connections = false };
        if (tlsFolder is not null)
        {
            X509Certificate2 ca = ScenarioCertificates.LoadCa(tlsFolder);
            handler.SslOptions = new SslClientAuthenticationOptions
            {
                ClientCertificates = new X509CertificateCollection { ScenarioCertificates.Load(ScenarioCertificates.HouseholdFile(tlsFolder, _id)) },
                RemoteCertificateValidationCallback = ScenarioCertificates.ServerValidator(ca),
            };
        }
        using GrpcChannel channel = GrpcChannel.ForAddress(address, new GrpcChannelOptions
        {
            HttpHandler = handler,
            DisposeHttpClient = false,
            MaxReceiveMessageSize = 64 << 20,
            MaxSendMessageSize = MessageChecks.MaxMessageBytes,
        });
        var client = new FederationHost.FederationHostClient(channel);
        using AsyncDuplexStreamingCall<HouseholdMessage, CoordinatorMessage> call = client.Session(cancellationToken: cancel);
        try
        {
            await ConverseAsync(call, cancel);
        }
        catch (Exception e) when (e is not RpcException { StatusCode: StatusCode.Aborted } and not LeftForGoodException && !cancel.IsCancellationRequested)
        {
            // A write or read failed: when the call ended with the drop notice (e.g. the household wrote after a stall,
            // into a call the coordinator had ended), report the notice rather than the transport error.
            if ((DroppedStatus(call) ?? await DrainForDropNoticeAsync(call)) is { } dropped)
            {
                throw dropped;
            }
            throw;
        }
    }

    /// <summary>Reads the rest of the call (a few seconds at most) for its status; the drop notice, or null.</summary>
    private static async Task<RpcException?> DrainForDropNoticeAsync(AsyncDuplexStreamingCall<HouseholdMessage, CoordinatorMessage> call)
    {
        using var limit = new CancellationTokenSource(TimeSpan.FromSeconds(5));
        try
        {
            while (await call.ResponseStream.MoveNext(limit.Token))
            {
            }
        }
        catch (RpcException r) when (DropNotice(r) is not null)
        {
            return r;
        }
        catch (Exception)
        {
            // any other end: not a drop notice
        }
        return DroppedStatus(call);
    }

    /// <summary>The call's drop notice as an exception, when the call has ended with one; else null.</summary>
    private static RpcException? DroppedStatus(AsyncDuplexStreamingCall<HouseholdMessage, CoordinatorMessage> call)
    {
        try
        {
            Status status = call.GetStatus();
            var notice = new RpcException(status, call.GetTrailers());
            return DropNotice(notice) is null ? null : notice;
        }
        catch (InvalidOperationException)
        {
            return null; // not ended yet
        }
    }

    private async Task ConverseAsync(AsyncDuplexStreamingCall<HouseholdMessage, CoordinatorMessage> call, CancellationToken cancel)
    {
        IClientStreamWriter<HouseholdMessage> send = call.RequestStream;
        bool dropped = _dropped;
        if (dropped)
        {
            // Dropped at a step deadline: the same machine and world ask to take part again (the coordinator answers at a round start).
            await send.WriteAsync(_agent.Rejoin(), cancel);
        }
        else
        {
            // Every connection starts from a fresh machine; a rejoin then restores the checkpoint the coordinator's round asks for.
            (_agent, _world) = Fresh();
            _step = 0;
            _applied.Clear();
            await send.WriteAsync(_agent.Join(), cancel);
        }
        bool done = false, first = true;
        // Masked sums: the first step waits for the key agreement — the directory with the household's own keys and a
        // relayed share from every peer (the coordinator relays them only once every household's shares are in).
        bool keysAwaited = false, directory = false, startWaiting = false;
        int sharesHeld = 0;
        await foreach (CoordinatorMessage message in call.ResponseStream.ReadAllAsync(cancel))
        {
            if (message.BodyCase == CoordinatorMessage.BodyOneofCase.Model && first)
            {
                first = false;
                if (dropped)
                {
                    CatchUp(message.Model.Round);
                }
                else if (message.Model.Round > 0)
                {
                    Restore(message.Model.Round);
                }
            }
            if (message.BodyCase == CoordinatorMessage.BodyOneofCase.Training && _agent.CanSnapshot)
            {
                Checkpoint(message.Training);
                if (message.Training.Round == HoldUploadInRound && message.Training.Selected)
                {
                    _log.LogWarning("household '{Id}': holding the upload of round {Round} (fault injection)", _id, message.Training.Round);
                    await (HoldUploadRelease ?? Task.Delay(Timeout.Infinite, cancel)).WaitAsync(cancel);
                }
            }
            HouseholdMessage? reply = _agent.Receive(message);
            switch (message.BodyCase)
            {
                case CoordinatorMessage.BodyOneofCase.Accepted:
                    keysAwaited = reply?.BodyCase == HouseholdMessage.BodyOneofCase.MaskedKeys;
                    break;
                case CoordinatorMessage.BodyOneofCase.MaskedKeys:
                    directory |= reply?.BodyCase == HouseholdMessage.BodyOneofCase.KeyShares;
                    break;
                case CoordinatorMessage.BodyOneofCase.KeyShare:
                    sharesHeld++;
                    break;
            }
            if (reply is not null)
            {
                await send.WriteAsync(reply, cancel);
            }
            switch (message.BodyCase)
            {
                case CoordinatorMessage.BodyOneofCase.Accepted:
                    _accepted = message.Accepted.Clone();
                    _everAdmitted = true;
                    _log.LogInformation("household '{Id}' admitted as {Index} of {Count}", _id, message.Accepted.HouseholdIndex, message.Accepted.HouseholdCount);
                    break;
                case CoordinatorMessage.BodyOneofCase.Model when _agent.Phase == HouseholdPhase.Ready:
                    startWaiting = true;
                    break;
                case CoordinatorMessage.BodyOneofCase.Setpoint:
                    int day = _world.Day + 1;
                    bool dayOver = Apply((float)_agent.Setpoint);
                    HouseholdMessage? after = _agent.CompleteStep(_cost[0]);
                    if (after is not null)
                    {
                        await send.WriteAsync(after, cancel);
                    }
                    if (dayOver)
                    {
                        _log.LogInformation("household '{Id}': day {Day} done", _id, day);
                    }
                    if (_step % _run.StepsPerRound != 0)
                    {
                        done = await NextOrDone(send, cancel);
                    }
                    break;
            }
            if (startWaiting && (!keysAwaited || (directory && sharesHeld >= _accepted!.HouseholdCount - 1)))
            {
                startWaiting = false;
                done = await NextOrDone(send, cancel);
            }
            if (done)
            {
                break;
            }
        }
        if (!done)
        {
            // The coordinator ended the stream before the last step: a restart or a lost connection; reconnect.
            throw new RpcException(new Status(StatusCode.Unavailable, "the coordinator ended the session before the run was over"));
        }
        try
        {
            await send.CompleteAsync();
            // Drain until the coordinator ends the stream.
            await foreach (CoordinatorMessage _ in call.ResponseStream.ReadAllAsync(cancel))
            {
            }
        }
        catch (RpcException e) when (e.StatusCode != StatusCode.Cancelled || !cancel.IsCancellationRequested)
        {
            // Every step is done; the coordinator stopping first is not a failure.
            _log.LogInformation("household '{Id}': coordinator gone after the last step ({Code})", _id, e.StatusCode);
        }
        _log.LogInformation("household '{Id}' finished after {Steps} steps", _id, _step);
    }

    /// <summary>Applies one setpoint to the household's world (live and when replaying a checkpoint).</summary>
    private bool Apply(float setpoint)
    {
        _action[0] = setpoint;
        bool dayOver = _world.Step(_action, _cost);
        _applied.Add(setpoint);
        _step++;
        if (dayOver && !_world.HorizonOver)
        {
            _world.NextDay();
        }
        return dayOver;
    }

    /// <summary>
    /// Back after a step dropout, at the start of <paramref name="round"/>: the steps the household missed ran in its world
    /// at the desired power (an offline gateway does not curtail; the in-process runner's rule for offline households).
    /// </summary>
    private void CatchUp(int round)
    {
        long from = _step, to = (long)round * _run.StepsPerRound;
        while (_step < to && !_world.HorizonOver)
        {
            _world.Observe(_state);
            Apply((float)_world.Environment.FlexDesiredKw[0]);
        }
        _dropped = false;
        DropoutRejoins++;
        _log.LogInformation("household '{Id}' rejoined at round {Round} after a step dropout; steps {From}..{To} ran at the desired power", _id, round, from, _step - 1);
    }

    private string CheckpointPath(int round) => Path.Combine(StateFolder!, FormattableString.Invariant($"{_id}.round-{round:D5}.ckpt"));

    private void Checkpoint(TrainingCall call)
    {
        if (StateFolder is null)
        {
            return;
        }
        Directory.CreateDirectory(StateFolder);
        byte[] accepted = _accepted!.ToByteArray();
        CheckpointFile.Write(CheckpointPath(call.Round), _run, _id, w =>
        {
            w.Write(call.Round);
            w.Write(call.Selected);
            w.Write(accepted.Length);
            w.Write(accepted);
            w.Write(_step);
            Federation.Protocol.SnapshotIO.WriteFloats(w, System.Runtime.InteropServices.CollectionsMarshal.AsSpan(_applied));
            _agent.WriteSnapshot(w);
        });
        // Two generations: a coordinator restarted from its previous round end asks for the older one.
        foreach (string old in Directory.EnumerateFiles(StateFolder, _id + ".round-*.ckpt").Order(StringComparer.Ordinal).SkipLast(KeptCheckpoints))
        {
            File.Delete(old);
        }
    }

    private void Restore(int round)
    {
        string path = CheckpointPath(round - 1);
        if (StateFolder is null || !File.Exists(path))
        {
            throw new InvalidOperationException($"household '{_id}': the coordinator continues with round {round}, and there is no checkpoint of round {round - 1} ({(StateFolder is null ? "no state folder" : path)})");
        }
        (HouseholdAgent agent, HouseholdControlTask world) = Fresh();
        JoinAccepted accepted = _accepted!;
        TrainingCall call = CheckpointFile.Read(path, _run, _id, r =>
        {
            var c = new TrainingCall { Round = r.ReadInt32(), Selected = r.ReadBoolean() };
            JoinAccepted saved = JoinAccepted.Parser.ParseFrom(r.ReadBytes(r.ReadInt32()));
            if (!saved.Equals(accepted))
            {
                throw new InvalidDataException("the admission differs from the checkpointed one");
            }
            long steps = r.ReadInt64();
            var applied = new float[steps];
            Federation.Protocol.SnapshotIO.ReadFloats(r, applied, "applied setpoints");
            agent.RestoreSnapshot(saved, r);
            (_agent, _world) = (agent, world);
            _step = 0;
            _applied.Clear();
            foreach (float a in applied)
            {
                Apply(a);
            }
            return c;
        });
        // Train as the household did at that round end; the upload is not resent (the coordinator closed that round).
        _agent.Receive(new CoordinatorMessage { HouseholdIndex = _agent.Index, Training = call });
        Rejoins++;
        _log.LogInformation("household '{Id}' restored its checkpoint of round {Old} ({Steps} steps replayed) and rejoins at round {Round}", _id, round - 1, _step, round);
    }

    private async Task<bool> NextOrDone(IClientStreamWriter<HouseholdMessage> send, CancellationToken cancel)
    {
        if (_world.HorizonOver)
        {
            return true;
        }
        if (_step == LeaveBeforeStep)
        {
            _log.LogWarning("household '{Id}': leaving before step {Step} (fault injection)", _id, _step);
            throw new LeftForGoodException($"household '{_id}' left before step {_step} (fault injection)");
        }
        if (_step == StallBeforeStep && !_stalled)
        {
            _stalled = true;
            _log.LogWarning("household '{Id}': stalling before step {Step} (fault injection)", _id, _step);
            return false;
        }
        _world.Observe(_state);
        ReadOnlySpan<double> min = _world.Environment.FlexMinKw, des = _world.Environment.FlexDesiredKw, baseKw = _world.Environment.BaseKw;
        HouseholdMessage begin = _agent.BeginStep(_step, _state, min[0], des[0], baseKw[0]);
        await send.WriteAsync(begin, cancel);
        return false;
    }

    /// <summary>The <see cref="LeaveBeforeStep"/> fault: the call is ended at once (no wait for a drop notice) and the run is not retried.</summary>
    private sealed class LeftForGoodException(string message) : OperationCanceledException(message);
}
