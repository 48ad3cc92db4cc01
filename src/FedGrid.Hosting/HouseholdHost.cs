using FedGrid.Federation.Households;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Training;
using FedGrid.Federation.Wire;
using FedGrid.Hosting.Wire;
using FedGrid.Households.Scenarios;
using System.Net.Security;
using System.Security.Cryptography.X509Certificates;
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
/// </summary>
public sealed class HouseholdHost
{
    private readonly HostedRunSettings _run;
    private readonly string _id;
    private readonly ILogger _log;
    private readonly HouseholdAgent _agent;
    private readonly HouseholdControlTask _world;
    private readonly float[] _state = new float[HouseholdControlTask.FeaturesPerHousehold];
    private readonly float[] _action = new float[1], _cost = new float[1];
    private long _step;
    private bool _admitted;
    private HouseholdMessage? _join;

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
        (int index, Scenario own) = HostedRunSettings.OwnView(full, householdId);
        Index = index;
        FederatedRunOptions options = run.CreateRunOptions();
        _world = new HouseholdControlTask(own, new HouseholdTaskOptions(Project: false));
        Federation.Households.HouseholdIdentity identity = new(own.Households[0].Id, own.Households[0].BusId, own.Households[0].KvarPerKw, HouseholdControlTask.FeaturesPerHousehold);
        _agent = new HouseholdAgent(identity, options.Federation, options.Scheme!, InProcessFederation.HouseholdSeed(options.Federation, index),
            options.ProjectionForm ?? new HouseholdProjectionInputs());
    }

    /// <summary>The household's block index in the scenario.</summary>
    public int Index { get; }

    /// <summary>Decision steps done.</summary>
    public long Steps => _step;

    /// <summary>Joins the coordinator at <paramref name="address"/> and runs every step of the scenario.</summary>
    /// <param name="address">The coordinator, e.g. http://127.0.0.1:5000.</param>
    /// <param name="cancel">Stops the run.</param>
    /// <param name="tlsFolder">Folder holding <c>ca.crt</c> and this household's <c>&lt;id&gt;.pfx</c> for mutual TLS (an https address), or null for plain text.</param>
    public async Task RunAsync(Uri address, CancellationToken cancel, string? tlsFolder = null)
    {
        // A connection that fails before admission (coordinator not up yet, TLS handshake lost on a busy machine) is
        // retried: nothing of this household reached the coordinator's state machine.
        for (int attempt = 1; ; attempt++)
        {
            try
            {
                await RunOnceAsync(address, cancel, tlsFolder);
                return;
            }
            catch (RpcException e) when (e.StatusCode == StatusCode.Unavailable && !_admitted && attempt < 10)
            {
                _log.LogWarning("household '{Id}': connection failed before admission ({Detail}); retry {Attempt}", _id, e.Status.Detail, attempt);
                await Task.Delay(TimeSpan.FromMilliseconds(250 * attempt), cancel);
            }
        }
    }

    private async Task RunOnceAsync(Uri address, CancellationToken cancel, string? tlsFolder)
    {
        ArgumentNullException.ThrowIfNull(address);
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
        IClientStreamWriter<HouseholdMessage> send = call.RequestStream;
        _join ??= _agent.Join().Clone(); // the agent joins once; a retried connection resends the same request
        await send.WriteAsync(_join, cancel);
        _world.Reset(_run.CreateRunOptions().Federation.Learning.Seed);
        int stepsPerRound = _run.StepsPerRound;
        bool done = false;
        await foreach (CoordinatorMessage message in call.ResponseStream.ReadAllAsync(cancel))
        {
            _admitted = true;
            HouseholdMessage? reply = _agent.Receive(message);
            if (reply is not null)
            {
                await send.WriteAsync(reply, cancel);
            }
            switch (message.BodyCase)
            {
                case CoordinatorMessage.BodyOneofCase.Accepted:
                    _log.LogInformation("household '{Id}' admitted as {Index} of {Count}", _id, message.Accepted.HouseholdIndex, message.Accepted.HouseholdCount);
                    break;
                case CoordinatorMessage.BodyOneofCase.Model when _agent.Phase == HouseholdPhase.Ready:
                    done = await NextOrDone(send, cancel);
                    break;
                case CoordinatorMessage.BodyOneofCase.Setpoint:
                    _action[0] = (float)_agent.Setpoint;
                    bool dayOver = _world.Step(_action, _cost);
                    HouseholdMessage? after = _agent.CompleteStep(_cost[0]);
                    if (after is not null)
                    {
                        await send.WriteAsync(after, cancel);
                    }
                    _step++;
                    if (dayOver)
                    {
                        _log.LogInformation("household '{Id}': day {Day} done", _id, _world.Day + 1);
                        if (!_world.HorizonOver)
                        {
                            _world.NextDay();
                        }
                    }
                    if (_step % stepsPerRound != 0)
                    {
                        done = await NextOrDone(send, cancel);
                    }
                    break;
            }
            if (done)
            {
                break;
            }
        }
        await send.CompleteAsync();
        // Drain until the coordinator ends the stream.
        await foreach (CoordinatorMessage _ in call.ResponseStream.ReadAllAsync(cancel))
        {
        }
        _log.LogInformation("household '{Id}' finished after {Steps} steps", _id, _step);
    }

    private async Task<bool> NextOrDone(IClientStreamWriter<HouseholdMessage> send, CancellationToken cancel)
    {
        if (_world.HorizonOver)
        {
            return true;
        }
        _world.Observe(_state);
        ReadOnlySpan<double> min = _world.Environment.FlexMinKw, des = _world.Environment.FlexDesiredKw, baseKw = _world.Environment.BaseKw;
        HouseholdMessage begin = _agent.BeginStep(_step, _state, min[0], des[0], baseKw[0]);
        await send.WriteAsync(begin, cancel);
        return false;
    }
}
