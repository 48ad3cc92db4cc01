using FedGrid.Federation.Wire;
using FedGrid.Hosting;
using FedGrid.Hosting.Wire;
using Google.Protobuf;
using Grpc.Core;
using Microsoft.Extensions.Logging.Abstractions;

namespace FedGrid.Hosting.Tests;

public sealed class ValidationTests
{
    private const int H1 = 64; // TrainingDefaults.ActorCritic hidden sizes [64, 64]

    private static HouseholdMessage Sums(int index, int round, long step, int actor = H1, int critic = H1, float fill = 0.5f)
    {
        var s = new PartialSums { Round = round, Step = step };
        for (int i = 0; i < actor; i++) s.Actor.Add(fill);
        for (int i = 0; i < critic; i++) s.Critic.Add(fill);
        return new HouseholdMessage { HouseholdIndex = index, PartialSums = s };
    }

    private static HouseholdMessage Poke(HouseholdMessage m, Action<HouseholdMessage> change)
    {
        change(m);
        return m;
    }

    private static HouseholdMessage Join(string id) =>
        new() { HouseholdIndex = -1, Join = new JoinRequest { HouseholdId = id, ProtocolVersion = 1, FeatureCount = 14, BusId = "B02", TanPhi = 0.3 } };

    /// <summary>Opens a session, sends the messages, reads until the coordinator ends it; returns the status and what came back.</summary>
    internal static async Task<(StatusCode Code, List<CoordinatorMessage> Received)> Send(TestCoordinator c, params HouseholdMessage[] messages)
    {
        using var channel = c.Channel();
        var client = new FederationHost.FederationHostClient(channel);
        using var call = client.Session(deadline: DateTime.UtcNow.AddMinutes(2)); // a stuck session fails with DEADLINE_EXCEEDED
        var received = new List<CoordinatorMessage>();
        try
        {
            foreach (HouseholdMessage m in messages) await call.RequestStream.WriteAsync(m);
            await call.RequestStream.CompleteAsync();
        }
        catch (Exception e) when (e is RpcException or InvalidOperationException or IOException or HttpRequestException or NullReferenceException)
        {
            // The coordinator ended the call while we were still writing; its status comes with the response. A stream
            // reset in the middle of a large write can surface from the HTTP/2 client as a transport error, and (seen once
            // in CI) as a NullReferenceException inside Http2Stream.SendDataAsync: the client library's race, not ours.
        }
        try
        {
            await foreach (CoordinatorMessage r in call.ResponseStream.ReadAllAsync()) received.Add(r);
            return (StatusCode.OK, received);
        }
        catch (RpcException e)
        {
            return (e.StatusCode, received);
        }
    }

    public static TheoryData<string, StatusCode, string> Malformed => new()
    {
        { "nan", StatusCode.InvalidArgument, "not a finite number" },
        { "infinity", StatusCode.InvalidArgument, "not a finite number" },
        { "absurd", StatusCode.InvalidArgument, "exceeds the magnitude limit" },
        { "short-actor", StatusCode.InvalidArgument, "holds 63 floats; the run's networks need 64" },
        { "long-critic", StatusCode.InvalidArgument, "holds 65 floats" },
        { "no-body", StatusCode.InvalidArgument, "without a body" },
        { "kw-nan", StatusCode.InvalidArgument, "proposal_kw = NaN" },
        { "kw-absurd", StatusCode.InvalidArgument, "base_kw = 1000000000 kW" },
        { "oversize", StatusCode.ResourceExhausted, "(ResourceExhausted)" },
        { "unknown-id", StatusCode.NotFound, "not on the roster" },
        { "not-a-join", StatusCode.FailedPrecondition, "starts with a join request" },
    };

    [Theory]
    [MemberData(nameof(Malformed))]
    public async Task MalformedFirstMessagesAreRejectedWithTheirStatusAndALogLine(string kind, StatusCode expected, string logged)
    {
        await using var c = await TestCoordinator.StartAsync(HostedRunTests.Small);
        HouseholdMessage m = kind switch
        {
            "nan" => Poke(Sums(0, 0, 0), m => m.PartialSums.Actor[3] = float.NaN),
            "infinity" => Poke(Sums(0, 0, 0), m => m.PartialSums.Critic[0] = float.PositiveInfinity),
            "absurd" => Sums(0, 0, 0, fill: 3e7f),
            "short-actor" => Sums(0, 0, 0, actor: H1 - 1),
            "long-critic" => Sums(0, 0, 0, critic: H1 + 1),
            "no-body" => new HouseholdMessage { HouseholdIndex = 0 },
            "kw-nan" => new HouseholdMessage { HouseholdIndex = 0, ProjectionInputs = new ProjectionInputs { ProposalKw = double.NaN } },
            "kw-absurd" => new HouseholdMessage { HouseholdIndex = 0, ProjectionInputs = new ProjectionInputs { BaseKw = 1e9 } },
            "oversize" => Sums(0, 0, 0, actor: MessageChecks.MaxMessageBytes / 4 + 1),
            "unknown-id" => Join("H99"),
            "not-a-join" => Sums(0, 0, 0),
            _ => throw new ArgumentException(kind),
        };
        var (code, received) = await Send(c, m);
        Assert.Equal(expected, code);
        Assert.Empty(received);
        if (logged.Length > 0) Assert.True(c.Logged(logged), string.Join("\n", c.Lines));
        Assert.True(c.Logged("rejected"), string.Join("\n", c.Lines));
        // Nothing reached the state machine: nobody connected, no step opened.
        var status = new FederationHost.FederationHostClient(c.Channel()).Status(new StatusRequest());
        Assert.Equal(0, status.Connected);
        Assert.Equal(-1, status.Step);
        Assert.Equal(0, status.Round);
    }

    [Fact]
    public async Task ImpersonationReplayAndOutOfOrderStepsAreRejectedAndTheRunIsUnchanged()
    {
        HostedRunSettings run = HostedRunTests.Small;
        await using var c = await TestCoordinator.StartAsync(run);
        // Two honest households hold H01 and H02; the third seat (H03) is the test's own session.
        var honest = new[] { "H01", "H02" }.Select(id => Task.Run(() => new HouseholdHost(run, id, NullLogger.Instance).RunAsync(c.Address, CancellationToken.None))).ToArray();
        var statusClient = new FederationHost.FederationHostClient(c.Channel());
        await c.WaitUntil(s => s.Connected >= 2, "the two honest households connected");

        // A second session for an id that is already connected (a duplicate or an impersonator without a certificate check).
        Assert.Equal(StatusCode.AlreadyExists, (await Send(c, Join("H01"))).Code);
        Assert.True(c.Logged("already has a session"));

        // The third household, driven by hand: it speaks as index 0 after being admitted as 2.
        using (var channel = c.Channel())
        {
            var call = new FederationHost.FederationHostClient(channel).Session(deadline: DateTime.UtcNow.AddMinutes(2)); // a stuck session fails with DEADLINE_EXCEEDED
            await call.RequestStream.WriteAsync(Join("H03"));
            Assert.True(await call.ResponseStream.MoveNext());
            Assert.Equal(2, call.ResponseStream.Current.Accepted.HouseholdIndex);
            await call.RequestStream.WriteAsync(Sums(0, 0, 0));
            var e = await Assert.ThrowsAsync<RpcException>(async () => { while (await call.ResponseStream.MoveNext()) { } });
            Assert.True(e.StatusCode == StatusCode.PermissionDenied, e.ToString());
            Assert.True(c.Logged("sent a message as index 0"));
        }
        await Task.WhenAll(honest).WaitAsync(TimeSpan.FromSeconds(5)).ContinueWith(_ => { });
        // The run cannot go on without H03 (its session ended), but nothing of the impersonation reached the state machine.
        var s = statusClient.Status(new StatusRequest());
        Assert.Equal(-1, s.Step);
    }

    [Fact]
    public async Task ReplayedAndOutOfOrderStepsEndTheSessionWithFailedPrecondition()
    {
        var run = HostedRunTests.Small with { Households = 1 };
        await using var c = await TestCoordinator.StartAsync(run);
        using var channel = c.Channel();
        var call = new FederationHost.FederationHostClient(channel).Session(deadline: DateTime.UtcNow.AddMinutes(2)); // a stuck session fails with DEADLINE_EXCEEDED
        await call.RequestStream.WriteAsync(Join("H01"));
        Assert.True(await call.ResponseStream.MoveNext()); // accepted
        Assert.True(await call.ResponseStream.MoveNext()); // initial model
        await call.RequestStream.WriteAsync(Sums(0, 0, 0));
        Assert.True(await call.ResponseStream.MoveNext()); // sums reply of step 0
        Assert.Equal(0, call.ResponseStream.Current.Sums.Step);
        await call.RequestStream.WriteAsync(Sums(0, 0, 0)); // replayed
        var e = await Assert.ThrowsAsync<RpcException>(async () => { while (await call.ResponseStream.MoveNext()) { } });
        Assert.Equal(StatusCode.FailedPrecondition, e.StatusCode);
        Assert.True(c.Logged("while the coordinator is CollectingProjectionInputs"), string.Join("\n", c.Lines));
        var s = new FederationHost.FederationHostClient(c.Channel()).Status(new StatusRequest());
        Assert.Equal(0, s.Step);
        Assert.Equal(0, s.Round);
    }

    [Fact]
    public async Task AStepFromTheWrongRoundIsRejected()
    {
        var run = HostedRunTests.Small with { Households = 1 };
        await using var c = await TestCoordinator.StartAsync(run);
        using var channel = c.Channel();
        var call = new FederationHost.FederationHostClient(channel).Session(deadline: DateTime.UtcNow.AddMinutes(2)); // a stuck session fails with DEADLINE_EXCEEDED
        await call.RequestStream.WriteAsync(Join("H01"));
        Assert.True(await call.ResponseStream.MoveNext());
        Assert.True(await call.ResponseStream.MoveNext());
        await call.RequestStream.WriteAsync(Sums(0, 3, 77)); // a later round's step, out of order
        var e = await Assert.ThrowsAsync<RpcException>(async () => { while (await call.ResponseStream.MoveNext()) { } });
        Assert.Equal(StatusCode.FailedPrecondition, e.StatusCode);
        Assert.True(c.Logged("for round 3 step 77; round 0 step 0 is open"), string.Join("\n", c.Lines));
        Assert.Equal(-1, new FederationHost.FederationHostClient(c.Channel()).Status(new StatusRequest()).Step);
    }
}
