using System.Text.Json;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using Google.Protobuf;
using Grpc.Core;
using Microsoft.Extensions.Logging.Abstractions;

namespace FedGrid.Hosting.Tests;

/// <summary>Scheme masked-sums (and its launch options) over the gRPC hosts.</summary>
public sealed class MaskedSumsHostTests
{
    private static readonly HostedRunSettings Masked = HostedRunTests.Small with { Scheme = "masked-sums" };

    // SEC 1 v2 section 2.3.3 (from memory): an uncompressed P-256 point is 0x04 || X || Y, 1 + 32 + 32 = 65 bytes.
    private static ByteString Point(byte first = 0x04, int length = 65)
    {
        var b = new byte[length];
        b[0] = first;
        return ByteString.CopyFrom(b);
    }

    private static void Refused(MessageChecks checks, HouseholdMessage message, string field)
    {
        var e = Assert.Throws<RpcException>(() => checks.Check(message));
        Assert.Equal(StatusCode.InvalidArgument, e.StatusCode);
        Assert.Contains(field, e.Status.Detail, StringComparison.Ordinal);
    }

    [Fact]
    public void MessageChecksTakeWellFormedKeyAgreementAndRecoveryMessagesAndNameTheBadField()
    {
        var checks = new MessageChecks(4, 3, households: 3);
        checks.Check(new HouseholdMessage { HouseholdIndex = 1, MaskedKeys = new MaskedSumsPublicKeys { MaskKey = Point(), ShareKey = Point() } });
        Refused(checks, new HouseholdMessage { HouseholdIndex = 1, MaskedKeys = new MaskedSumsPublicKeys { MaskKey = Point(length: 64), ShareKey = Point() } }, "masked_keys.mask_key");
        Refused(checks, new HouseholdMessage { HouseholdIndex = 1, MaskedKeys = new MaskedSumsPublicKeys { MaskKey = Point(), ShareKey = Point(first: 0x02) } }, "masked_keys.share_key");

        // A share is the value f(holder + 1) in GF(2^521 - 1): ceil(521 / 8) = 66 bytes, plus the 16-byte AES-GCM tag
        // (NIST SP 800-38D, 128-bit tag): 82 bytes.
        EncryptedKeyShare Share(int owner, int holder, int bytes = 82) => new() { Owner = owner, Holder = holder, Ciphertext = ByteString.CopyFrom(new byte[bytes]) };
        HouseholdMessage Shares(params EncryptedKeyShare[] s)
        {
            var k = new KeyShares();
            k.Shares.AddRange(s);
            return new HouseholdMessage { HouseholdIndex = 1, KeyShares = k };
        }
        checks.Check(Shares(Share(1, 0), Share(1, 2)));
        Refused(checks, Shares(Share(1, 0), Share(1, 2), Share(1, 2)), "key_shares holds 3 shares");
        Refused(checks, Shares(Share(0, 2)), "key_shares.shares[0].owner");
        Refused(checks, Shares(Share(1, 1)), "key_shares.shares[0].holder");
        Refused(checks, Shares(Share(1, 0), Share(1, 0)), "key_shares.shares[1].holder");
        Refused(checks, Shares(Share(1, 3)), "key_shares.shares[0].holder");
        Refused(checks, Shares(Share(1, 0, 81)), "key_shares.shares[0].ciphertext");

        HouseholdMessage Recovery(params (int Owner, int Bytes)[] s)
        {
            var r = new RecoveryShares { Round = 0, Step = 5 };
            r.Shares.AddRange(s.Select(x => new RevealedShare { Owner = x.Owner, Value = ByteString.CopyFrom(new byte[x.Bytes]) }));
            return new HouseholdMessage { HouseholdIndex = 0, RecoveryShares = r };
        }
        checks.Check(Recovery((2, 66)));
        Refused(checks, Recovery((2, 65)), "recovery_shares.shares[0].value");
        Refused(checks, Recovery((3, 66)), "recovery_shares.shares[0].owner");
        Refused(checks, Recovery((2, 66), (2, 66)), "recovery_shares.shares[1].owner");

        // Masked partial sums: H1 ring elements per network, the clear fields empty.
        var masked = new PartialSums { Round = 0, Step = 0 };
        masked.MaskedActor.AddRange(new ulong[4]);
        masked.MaskedCritic.AddRange(new ulong[3]);
        checks.Check(new HouseholdMessage { HouseholdIndex = 0, PartialSums = masked });
        var shortSums = masked.Clone();
        shortSums.MaskedCritic.RemoveAt(0);
        Refused(checks, new HouseholdMessage { HouseholdIndex = 0, PartialSums = shortSums }, "partial_sums.masked_critic");
        var both = masked.Clone();
        both.Actor.AddRange(new float[4]);
        Refused(checks, new HouseholdMessage { HouseholdIndex = 0, PartialSums = both }, "both clear and masked");
    }

    [Theory]
    [InlineData("masked-sums")]
    [InlineData("dp-masked-sums")]
    public async Task MaskedSumsOverTheHostsGiveTheInProcessModelBitForBit(string scheme)
    {
        HostedRunSettings run = HostedRunTests.Small with { Scheme = scheme };
        string dir = Directory.CreateTempSubdirectory("fedgrid-masked-hosts-").FullName;
        string transcript = Path.Combine(dir, "run.fgt");
        await using var c = await TestCoordinator.StartAsync(run, transcript: transcript);
        var hosts = run.CreateScenario().Households
            .Select(h => Task.Run(() => new HouseholdHost(run, h.Id, NullLogger.Instance).RunAsync(c.Address, CancellationToken.None))).ToArray();
        CoordinatorOutcome outcome = await c.Run.WaitAsync(TimeSpan.FromMinutes(3));
        await Task.WhenAll(hosts).WaitAsync(TimeSpan.FromMinutes(1));
        Assert.True(outcome.Ok, outcome.Error);
        Assert.Equal(96, outcome.Steps);
        var (sha, inProcess) = run.RunInProcess();
        Assert.Equal(Convert.ToHexStringLower(sha), outcome.ModelSha256);
        Assert.Equal(inProcess.WireBytes, outcome.WireBytes);
        using var reader = TranscriptReader.Open(transcript);
        var received = reader.Records().Where(r => r.Received is not null).Select(r => r.Received).ToList();
        // The key agreement is recorded in household order, after the joins and before the first partial sums.
        var keys = received.Where(m => m.BodyCase == HouseholdMessage.BodyOneofCase.MaskedKeys).Select(m => m.HouseholdIndex).ToList();
        var shares = received.Where(m => m.BodyCase == HouseholdMessage.BodyOneofCase.KeyShares).Select(m => m.HouseholdIndex).ToList();
        Assert.Equal([0, 1, 2], keys);
        Assert.Equal([0, 1, 2], shares);
        Assert.True(received.FindLastIndex(m => m.BodyCase == HouseholdMessage.BodyOneofCase.KeyShares)
            < received.FindIndex(m => m.BodyCase == HouseholdMessage.BodyOneofCase.PartialSums));
        // The coordinator saw ring elements only, never a clear partial sum.
        Assert.All(received.Where(m => m.BodyCase == HouseholdMessage.BodyOneofCase.PartialSums), m =>
        {
            Assert.Empty(m.PartialSums.Actor);
            Assert.NotEmpty(m.PartialSums.MaskedActor);
        });
    }

    [Fact]
    public async Task AHouseholdThatLeavesAMaskedSumsRunIsDroppedAndTheSurvivorsSharesRecoverTheSum()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-masked-dropout-").FullName;
        string transcript = Path.Combine(dir, "run.fgt");
        // A leave that lands at a round start is first waited for under --rejoin-timeout (kept short here), then dropped by the step deadline.
        await using var c = await TestCoordinator.StartAsync(Masked, roundTimeout: TimeSpan.FromSeconds(5), stepTimeout: TimeSpan.FromSeconds(1), transcript: transcript,
            adjust: o => o with { RejoinTimeout = TimeSpan.FromSeconds(3) });
        Task[] hosts = await c.RunHouseholdsOneLeavingAt(Masked, "H03", step: 30);
        await c.CompletesWithout(hosts, left: 2, steps: 96, TimeSpan.FromMinutes(3));
        using var reader = TranscriptReader.Open(transcript);
        var records = reader.Records().ToList();
        var events = records.Where(r => r.Event is not null).Select(r => r.Event).ToList();
        Assert.Contains(events, e => e.Kind == EventKind.StepDropout && e.Households.SequenceEqual([2]));
        // H03 left mid-round: at its first missing partial sums the two survivors (the threshold t = 2 of 3) revealed
        // their shares of its mask key and the step's total was recovered, not abandoned.
        Assert.Contains(records, r => r.Received?.BodyCase == HouseholdMessage.BodyOneofCase.RecoveryShares);
        Assert.Contains(events, e => e.Kind == EventKind.SumRecovered && e.Households.SequenceEqual([2]));
        Assert.DoesNotContain(events, e => e.Kind == EventKind.SumAbandoned);
        Assert.Contains(events, e => e.Kind == EventKind.RoundAggregated && !e.Households.Contains(2));
    }

    [Fact]
    public void CheckpointsRefuseTheMaskedSchemesBeforeTheRunStarts()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-masked-state-").FullName;
        var e = Assert.Throws<ArgumentException>(() => new CoordinatorEngine(new CoordinatorHostOptions { Run = Masked, StateFolder = dir }, NullLogger.Instance));
        Assert.Contains("--state", e.Message, StringComparison.Ordinal);
        Assert.Contains("masked-sums", e.Message, StringComparison.Ordinal);
        Assert.False(File.Exists(Path.Combine(dir, CoordinatorEngine.CheckpointFileName)));
        Assert.Throws<ArgumentException>(() => (HostedRunTests.Small with { Scheme = "dp-masked-sums" }).RequireCheckpointable());
        Assert.Throws<ArgumentException>(() => (HostedRunTests.Small with { Scheme = "dp" }).RequireCheckpointable());
        // Exactly the clear schemes checkpoint.
        Assert.Equal(["plain", "private-columns"],
            FedGrid.Federation.Schemes.FederationSchemes.Names.Where(n => (HostedRunTests.Small with { Scheme = n }).Checkpointable));
        HostedRunTests.Small.RequireCheckpointable();
        (HostedRunTests.Small with { Scheme = "private-columns" }).RequireCheckpointable();
        Assert.Throws<ArgumentException>(() => (HostedRunTests.Small with { Scheme = "sealed" }).Validate());
    }

    [Fact]
    public void LaunchPassesTheSchemeStepTimeoutAndStateFoldersToEveryProcess()
    {
        string[] transport = ["--insecure-loopback"];
        var coordinator = Launcher.CoordinatorArguments(Masked, 5151, transport, "/tmp/r.json", TimeSpan.FromSeconds(1.5), "/runs/a");
        Assert.Equal("coordinator", coordinator[0]);
        Assert.Equal("masked-sums", After(coordinator, "--scheme"));
        Assert.Equal("1.5", After(coordinator, "--step-timeout"));
        Assert.Equal(Path.Combine("/runs/a", "coordinator"), After(coordinator, "--state"));
        var household = Launcher.HouseholdArguments(Masked, "H02", "http://127.0.0.1:5151", transport, "/runs/a");
        Assert.Equal("household", household[0]);
        Assert.Equal("masked-sums", After(household, "--scheme"));
        Assert.Equal(Path.Combine("/runs/a", "H02"), After(household, "--state"));
        Assert.DoesNotContain("--step-timeout", household);
        var plain = Launcher.CoordinatorArguments(HostedRunTests.Small, 5151, transport, "/tmp/r.json", null, null);
        Assert.DoesNotContain("--step-timeout", plain);
        Assert.DoesNotContain("--state", plain);
        Assert.Equal("plain", After(plain, "--scheme"));
    }

    private static string After(IReadOnlyList<string> args, string option)
    {
        int i = args.ToList().IndexOf(option);
        Assert.True(i >= 0 && i + 1 < args.Count, $"{option} missing in {string.Join(' ', args)}");
        return args[i + 1];
    }

    [Theory]
    [InlineData("masked-sums")]
    [InlineData("dp-masked-sums")] // the dp wrapper over masked sums: its key agreement found through the scheme object, not its name
    public async Task LaunchWithRealProcessesRunsMaskedSumsToTheInProcessModel(string scheme)
    {
        var (code, stdout, stderr) = await CliRun.RunAsync(TimeSpan.FromMinutes(4), "launch", "--households", "3", "--days", "1", "--seed", "7", "--steps-per-round", "24",
            "--scheme", scheme, "--step-timeout", "30", "--json");
        Assert.True(code == 0, stderr);
        using JsonDocument d = JsonDocument.Parse(stdout);
        JsonElement r = d.RootElement;
        Assert.Equal(4, r.GetProperty("processes").GetInt32());
        Assert.True(r.GetProperty("matchesInProcess").GetBoolean());
        Assert.Equal(Convert.ToHexStringLower((Masked with { Scheme = scheme }).RunInProcess().ModelSha256), r.GetProperty("finalModelSha256").GetString());
        Assert.Contains("finished after 96 steps", stderr, StringComparison.Ordinal);
    }

    [Fact]
    public void TheHostsAskTheSchemeObjectWhetherItHasMessagesOfItsOwn()
    {
        foreach (string name in FedGrid.Federation.Schemes.FederationSchemes.Names)
        {
            var run = HostedRunTests.Small with { Scheme = name };
            var options = run.CreateRunOptions();
            var c = new FedGrid.Federation.Coordination.Coordinator(FedGrid.Federation.Runs.InProcessFederation.CreateCoordinatorSetup(run.CreateScenario(), options,
                FedGrid.Federation.Training.HouseholdControlTask.FeaturesPerHousehold), NullTranscript.Instance);
            // Masked sums (alone or under the dp wrapper) agree keys after admission; the other schemes send nothing of their own.
            Assert.Equal(name is "masked-sums" or "dp-masked-sums", c.SchemeMessages);
        }
    }

    [Fact]
    public async Task LaunchRefusesStateWithMaskedSumsAsAUserErrorBeforeStartingProcesses()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-masked-launch-state-" + Guid.NewGuid().ToString("N"));
        var (code, _, stderr) = await CliRun.RunAsync(TimeSpan.FromMinutes(2), "launch", "--households", "3", "--scheme", "masked-sums", "--state", dir, "--json");
        Assert.NotEqual(0, code);
        Assert.Contains("--state", stderr, StringComparison.Ordinal);
        Assert.Contains("cannot be checkpointed", stderr, StringComparison.Ordinal);
        Assert.DoesNotContain("[coordinator]", stderr, StringComparison.Ordinal);
        Assert.False(Directory.Exists(dir));
    }
}
