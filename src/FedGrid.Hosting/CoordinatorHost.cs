using System.Net;
using FedGrid.Federation.Wire;
using FedGrid.Hosting.Wire;
using Grpc.Core;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Hosting;
using System.Security.Cryptography.X509Certificates;
using Microsoft.AspNetCore.Server.Kestrel.Core;
using Microsoft.AspNetCore.Server.Kestrel.Https;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Hosting;
using Microsoft.Extensions.Logging;

namespace FedGrid.Hosting;

/// <summary>The gRPC service of <c>hosting.proto</c> over a <see cref="CoordinatorEngine"/>.</summary>
/// <param name="engine">The engine.</param>
/// <param name="log">Logger.</param>
public sealed class FederationHostService(CoordinatorEngine engine, ILogger<FederationHostService> log) : FederationHost.FederationHostBase
{
    /// <inheritdoc />
    public override Task<RunStatus> Status(StatusRequest request, ServerCallContext context) => Task.FromResult(engine.Status());

    /// <inheritdoc />
    public override async Task Session(IAsyncStreamReader<HouseholdMessage> requestStream, IServerStreamWriter<CoordinatorMessage> responseStream, ServerCallContext context)
    {
        ArgumentNullException.ThrowIfNull(requestStream);
        ArgumentNullException.ThrowIfNull(responseStream);
        ArgumentNullException.ThrowIfNull(context);
        CancellationToken cancel = context.CancellationToken;
        try
        {
            if (!await requestStream.MoveNext(cancel))
            {
                return;
            }
        }
        catch (RpcException e)
        {
            throw Log(e); // e.g. RESOURCE_EXHAUSTED: above the size limit
        }
        HouseholdMessage first = requestStream.Current;
        try
        {
            engine.Checks.Check(first);
        }
        catch (RpcException e)
        {
            throw Log(e);
        }
        // A session starts with a join request, or (a household dropped at a step deadline that kept its state) a rejoin
        // request under its household index.
        bool rejoin = first.BodyCase == HouseholdMessage.BodyOneofCase.Rejoin;
        if (first.BodyCase != HouseholdMessage.BodyOneofCase.Join && !rejoin)
        {
            throw Log(new RpcException(new Status(StatusCode.FailedPrecondition, $"a session starts with a join request (or a dropped household's rejoin request), not {first.BodyCase}")));
        }
        string claimed = rejoin
            ? engine.RosterId(first.HouseholdIndex) ?? throw Log(new RpcException(new Status(StatusCode.NotFound, $"rejoin request for household index {first.HouseholdIndex}, not on the roster")))
            : first.Join.HouseholdId;
        if (engine.Options.ClientCertificates)
        {
            string? named = ScenarioCertificates.HouseholdId(context.GetHttpContext().Connection.ClientCertificate);
            if (!string.Equals(named, claimed, StringComparison.Ordinal))
            {
                throw Log(new RpcException(new Status(StatusCode.PermissionDenied,
                    $"the client certificate names household '{named}'; the {(rejoin ? "rejoin" : "join")} request claims '{claimed}'")));
            }
        }
        HouseholdSession session = rejoin ? engine.OpenDropped(first.HouseholdIndex) : engine.Open(first.Join);
        log.LogInformation("household '{Id}' connected as index {Index} from {Peer}", session.Id, session.Index, context.Peer);
        engine.Post(session, first);
        using var stop = CancellationTokenSource.CreateLinkedTokenSource(cancel);
        Task writer = WriteAsync(session, responseStream, stop.Token, cancel);
        Task reader = ReadAsync(session, requestStream, stop.Token);
        try
        {
            Task ended = await Task.WhenAny(writer, reader, session.Fault.Task);
            if (ended == session.Fault.Task)
            {
                await StopWriting(stop, writer);
                throw session.FaultTrailers is { } trailers ? new RpcException(session.Fault.Task.Result, trailers) : new RpcException(session.Fault.Task.Result);
            }
            if (ended == reader)
            {
                if (reader.IsFaulted)
                {
                    await StopWriting(stop, writer);
                }
                await reader; // throws a check failure
                await writer; // the household closed its side: send what is left
            }
            else
            {
                await writer;
            }
        }
        finally
        {
            await stop.CancelAsync();
            engine.Closed(session);
        }
    }

    private async Task ReadAsync(HouseholdSession session, IAsyncStreamReader<HouseholdMessage> requests, CancellationToken cancel)
    {
        while (await MoveNext(requests, cancel))
        {
            HouseholdMessage m = requests.Current;
            try
            {
                engine.Checks.Check(m);
            }
            catch (RpcException e)
            {
                throw Log(e);
            }
            if (m.HouseholdIndex != session.Index)
            {
                throw Log(new RpcException(new Status(StatusCode.PermissionDenied,
                    $"session of household '{session.Id}' (index {session.Index}) sent a message as index {m.HouseholdIndex}")));
            }
            if (m.BodyCase == HouseholdMessage.BodyOneofCase.Join)
            {
                throw Log(new RpcException(new Status(StatusCode.FailedPrecondition, $"household '{session.Id}' sent a second join request")));
            }
            engine.Post(session, m);
        }
    }

    private async Task<bool> MoveNext(IAsyncStreamReader<HouseholdMessage> requests, CancellationToken cancel)
    {
        try
        {
            return await requests.MoveNext(cancel);
        }
        catch (RpcException e) when (e.StatusCode != StatusCode.Cancelled)
        {
            throw Log(e);
        }
    }

    /// <summary>
    /// Sends the session's outgoing messages until <paramref name="stopTaking"/>. A write in progress is not cancelled by
    /// it (only by <paramref name="callAborted"/>, the call's own token): ending the call with an error status while a
    /// write is in flight makes the server reset the stream (INTERNAL_ERROR) instead of sending that status.
    /// </summary>
    private static async Task WriteAsync(HouseholdSession session, IServerStreamWriter<CoordinatorMessage> responses, CancellationToken stopTaking,
        CancellationToken callAborted)
    {
        await foreach (CoordinatorMessage m in session.Outgoing.Reader.ReadAllAsync(stopTaking))
        {
            await responses.WriteAsync(m, callAborted);
        }
    }

    /// <summary>Stops taking outgoing messages and waits for the write in flight, before the call ends with an error status.</summary>
    private static async Task StopWriting(CancellationTokenSource stop, Task writer)
    {
        await stop.CancelAsync();
        await writer.ContinueWith(_ => { }, CancellationToken.None, TaskContinuationOptions.ExecuteSynchronously, TaskScheduler.Default);
    }

    private RpcException Log(RpcException e)
    {
        log.LogWarning("rejected message ({Code}): {Detail}", e.StatusCode, e.Status.Detail);
        return e;
    }
}

/// <summary>The coordinator process: an ASP.NET Core generic host serving <see cref="FederationHostService"/> until the run ends.</summary>
public static class CoordinatorHost
{
    /// <summary>Builds the host on <paramref name="address"/>:<paramref name="port"/> (0: any free port).</summary>
    /// <param name="options">Settings.</param>
    /// <param name="address">Address to listen on.</param>
    /// <param name="port">Port.</param>
    /// <param name="tlsFolder">Folder of <see cref="ScenarioCertificates"/> for mutual TLS, or null for plain-text HTTP/2 (allowed on a loopback address only).</param>
    /// <param name="logging">Extra logging set-up, or null.</param>
    /// <returns>The application (not started).</returns>
    public static WebApplication Build(CoordinatorHostOptions options, IPAddress address, int port, string? tlsFolder, Action<ILoggingBuilder>? logging = null)
    {
        ArgumentNullException.ThrowIfNull(options);
        ArgumentNullException.ThrowIfNull(address);
        if (tlsFolder is null && !IPAddress.IsLoopback(address))
        {
            throw new ArgumentException($"plain-text transport is allowed on loopback only, not on {address}");
        }
        options = options with { ClientCertificates = tlsFolder is not null };
        WebApplicationBuilder builder = WebApplication.CreateSlimBuilder();
        builder.Logging.ClearProviders();
        builder.Logging.AddSimpleConsole(o => { o.SingleLine = true; o.TimestampFormat = "HH:mm:ss.fff "; });
        builder.Logging.SetMinimumLevel(LogLevel.Information);
        builder.Logging.AddFilter("Microsoft", LogLevel.Warning);
        builder.Logging.AddFilter("Grpc", LogLevel.Warning);
        logging?.Invoke(builder.Logging);
        X509Certificate2? ca = null, server = null;
        if (tlsFolder is not null)
        {
            ca = ScenarioCertificates.LoadCa(tlsFolder);
            server = ScenarioCertificates.Load(Path.Combine(tlsFolder, ScenarioCertificates.CoordinatorFile));
        }
        builder.WebHost.ConfigureKestrel(k => k.Listen(address, port, l =>
        {
            l.Protocols = HttpProtocols.Http2;
            if (server is not null)
            {
                l.UseHttps(https =>
                {
                    https.ServerCertificate = server;
                    // Tens of gateways handshaking at once on a busy machine take longer than Kestrel's 10 s default.
                    https.HandshakeTimeout = TimeSpan.FromMinutes(2);
                    https.ClientCertificateMode = ClientCertificateMode.RequireCertificate;
                    https.CheckCertificateRevocation = false;
                    // Only certificates issued by the scenario CA for client authentication.
                    https.ClientCertificateValidation = (cert, _, _) => ScenarioCertificates.ChainsTo(cert, ca!, ScenarioCertificates.ClientAuth);
                });
            }
        }));
        builder.Services.AddGrpc(g =>
        {
            g.MaxReceiveMessageSize = MessageChecks.MaxMessageBytes;
            g.MaxSendMessageSize = null;
            g.EnableDetailedErrors = true;
        });
        builder.Services.AddSingleton(options);
        builder.Services.AddSingleton(sp => new CoordinatorEngine(options, sp.GetRequiredService<ILoggerFactory>().CreateLogger("FedGrid.Coordinator")));
        WebApplication app = builder.Build();
        app.MapGrpcService<FederationHostService>();
        return app;
    }

    /// <summary>Runs the coordinator until the run is over or <paramref name="cancel"/> fires.</summary>
    /// <param name="app">From <see cref="Build"/>.</param>
    /// <param name="listening">Called with the bound port once listening, or null.</param>
    /// <param name="cancel">Stops the run.</param>
    /// <param name="stopWhenDone">Stop the server when the run is over (false: the caller stops it, e.g. a test that keeps probing a finished coordinator).</param>
    /// <returns>The outcome.</returns>
    public static async Task<CoordinatorOutcome> RunAsync(WebApplication app, Action<int>? listening, CancellationToken cancel, bool stopWhenDone = true)
    {
        ArgumentNullException.ThrowIfNull(app);
        CoordinatorEngine engine = app.Services.GetRequiredService<CoordinatorEngine>();
        await app.StartAsync(cancel);
        int port = new Uri(app.Services.GetRequiredService<Microsoft.AspNetCore.Hosting.Server.IServer>()
            .Features.Get<Microsoft.AspNetCore.Hosting.Server.Features.IServerAddressesFeature>()!.Addresses.First()).Port;
        listening?.Invoke(port);
        Task pump = engine.RunAsync(cancel);
        CoordinatorOutcome outcome;
        try
        {
            outcome = await engine.Completion.WaitAsync(cancel);
        }
        catch (OperationCanceledException)
        {
            outcome = await engine.Completion;
        }
        await pump;
        if (!stopWhenDone)
        {
            return outcome;
        }
        // Let the sessions send their last messages, then stop.
        using var grace = new CancellationTokenSource(TimeSpan.FromSeconds(10));
        await app.StopAsync(grace.Token);
        engine.Dispose();
        return outcome;
    }
}
