using FedGrid.Federation.Coordination;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Tests;

/// <summary>
/// The coordinator keeps a count of its dropped households (its quorum checks read it: a step is complete at M − dropped
/// messages, the projection runs at once when all are dropped). These tests drive it through step dropouts, rejoins,
/// dropouts in the round of a rejoin, masked-sums recovery and masked-upload dropouts, and check the kept count against
/// the count of its dropped flags at every record it writes and against the runner's offline households after every step.
/// </summary>
public sealed class DroppedCountTests
{
    private const int Households = 32, StepsPerRound = 24;

    /// <summary>
    /// Checks the kept count against the flags at every record the coordinator writes: each message it receives (before
    /// handling it, so after the previous one), each message it sends and each event (after the change it records).
    /// </summary>
    private sealed class DroppedCountCheck : ITranscriptSink
    {
        public Coordinator? Coordinator { get; set; }

        public int Checks { get; private set; }

        public List<string> Mismatches { get; } = [];

        public List<CoordinatorEvent> Events { get; } = [];

        /// <summary>The most households dropped at once at any check.</summary>
        public int MaxDropped { get; private set; }

        public void Received(int round, long step, HouseholdMessage message) =>
            Check($"round {round} step {step}: before {message.BodyCase} from household {message.HouseholdIndex}");

        public void Sent(int round, long step, CoordinatorMessage message) =>
            Check($"round {round} step {step}: sending {message.BodyCase} to household {message.HouseholdIndex}");

        public void Event(int round, long step, CoordinatorEvent coordinatorEvent)
        {
            Events.Add(coordinatorEvent.Clone());
            Check($"round {round} step {step}: event {coordinatorEvent.Kind} [{string.Join(",", coordinatorEvent.Households)}]");
        }

        public void Flush()
        {
        }

        public void Check(string where)
        {
            if (Coordinator is not { } c)
            {
                return; // the machine is being built (nothing is dropped yet)
            }
            Checks++;
            MaxDropped = Math.Max(MaxDropped, c.DroppedCount);
            int flags = Flags(c);
            if (flags != c.DroppedCount && Mismatches.Count < 20)
            {
                Mismatches.Add($"{where}: kept {c.DroppedCount}, flags {flags}");
            }
        }

        public int Households(EventKind kind) => Events.Where(e => e.Kind == kind).Sum(e => e.Households.Count);
    }

    private static int Flags(Coordinator c)
    {
        int d = 0;
        for (int h = 0; h < Households; h++)
        {
            d += c.IsDropped(h) ? 1 : 0;
        }
        return d;
    }

    private static int Offline(InProcessFederation run)
    {
        int d = 0;
        for (int h = 0; h < Households; h++)
        {
            d += run.IsOffline(h) ? 1 : 0;
        }
        return d;
    }

    /// <summary>Runs the day step by step; after every step the kept count equals the flags and the runner's offline households.</summary>
    private static (InProcessFederation Run, DroppedCountCheck Check) Drive(IFederationScheme scheme, FederatedRunOptions? options = null, params ScriptedDropout[] script)
    {
        var check = new DroppedCountCheck();
        var run = new InProcessFederation(TestRuns.Default(), (options ?? new FederatedRunOptions()) with
        {
            Scheme = scheme,
            Federation = TestRuns.Options(stepsPerRound: StepsPerRound),
            ScriptedDropouts = script,
        }, check);
        Assert.Equal(Households, run.Households.Count);
        check.Coordinator = run.Coordinator;
        while (run.StepOnce())
        {
            check.Check($"after step {run.StepCount - 1}");
            Assert.Equal(Flags(run.Coordinator), run.Coordinator.DroppedCount);
            Assert.Equal(Offline(run), run.Coordinator.DroppedCount);
        }
        run.Finish();
        Assert.Empty(check.Mismatches);
        Assert.Equal(0, run.Coordinator.DroppedCount); // every dropped household rejoined at the last round end
        return (run, check);
    }

    [Fact]
    public void The_kept_count_follows_the_flags_through_step_dropouts_rejoins_and_dropouts_in_a_rejoin_round()
    {
        var (run, check) = Drive(ClearScheme.Plain(), null,
            new ScriptedDropout(3, 5),                                        // partial sums missing
            new ScriptedDropout(5, 10, DropoutPoint.BeforeProjectionInputs),  // left between its sums and its projection inputs
            new ScriptedDropout(9, 10),                                       // a second dropout in the same step
            new ScriptedDropout(7, StepsPerRound - 1),                        // the round's last step: the round ends with 4 dropped
            new ScriptedDropout(3, StepsPerRound),                            // rejoined at round 1's start, dropped again at its first step
            new ScriptedDropout(11, StepsPerRound + 6),                       // a later step of that round: 3 stays dropped, not dropped twice
            new ScriptedDropout(3, StepsPerRound + 7),                        // offline already: nothing more happens
            new ScriptedDropout(12, 2 * StepsPerRound - 1, DropoutPoint.BeforeUpload), // a lost upload (plain): not a step dropout
            new ScriptedDropout(13, 3 * StepsPerRound - 1, DropoutPoint.BeforeProjectionInputs));
        Assert.Equal(4, check.MaxDropped);
        Assert.Contains(check.Events, e => e.Kind == EventKind.RoundSelected && e.Detail.Contains("4 more drawn but dropped", StringComparison.Ordinal));
        Assert.Equal(7, run.Coordinator.StepDropouts);
        Assert.Equal(7, run.Coordinator.Rejoins);
        Assert.Equal(7, check.Households(EventKind.StepDropout));
        Assert.Equal(7, check.Households(EventKind.Rejoined));
        Assert.Equal(1, check.Households(EventKind.Dropout)); // household 12's lost upload
        Assert.Equal(4, run.Coordinator.AggregatedRounds);
        Assert.True(check.Checks > 10_000, $"{check.Checks} checks");
    }

    [Fact]
    public void The_kept_count_follows_the_flags_under_seeded_random_step_dropouts()
    {
        // About 5 % of the households each step: many rounds end with several dropped, and rejoined households drop again.
        var (run, check) = Drive(ClearScheme.Plain(), new FederatedRunOptions { StepDropout = 0.05 });
        Assert.True(run.Coordinator.StepDropouts >= 20, $"{run.Coordinator.StepDropouts} dropouts");
        Assert.Equal(run.Coordinator.StepDropouts, run.Coordinator.Rejoins);
        Assert.Equal(run.Coordinator.StepDropouts, check.Households(EventKind.StepDropout));
        Assert.True(check.MaxDropped >= 10, $"at most {check.MaxDropped} dropped at once");
    }

    [Fact]
    public void The_kept_count_follows_the_flags_when_all_but_one_household_drop_in_a_step()
    {
        // 30 miss their partial sums and one its projection inputs: the projection phase goes on with one household.
        ScriptedDropout[] script = [.. Enumerable.Range(2, 30).Select(m => new ScriptedDropout(m, 5)), new ScriptedDropout(1, 5, DropoutPoint.BeforeProjectionInputs)];
        var (run, check) = Drive(ClearScheme.Plain(), null, script);
        Assert.Equal(Households - 1, check.MaxDropped);
        Assert.Equal(Households - 1, run.Coordinator.Rejoins);
        Assert.Equal(2, check.Events.Count(e => e.Kind == EventKind.StepDropout));
    }

    [Fact]
    public void The_kept_count_follows_the_flags_through_masked_sums_recovery_and_a_survivor_that_withholds_its_shares()
    {
        // 15 drop at step 5 and one survivor goes offline before answering the recovery request (dropped in the recovery
        // phase, among the households that sent partial sums only); in round 1 one of the 15 drops again after rejoining.
        var scheme = new MaskedSumsScheme(ClearScheme.Plain());
        var (run, check) = Drive(scheme, null,
            [.. Enumerable.Range(10, 15).Select(m => new ScriptedDropout(m, 5)), new ScriptedDropout(0, 5, DropoutPoint.BeforeRecoveryShares),
                new ScriptedDropout(12, StepsPerRound + 3)]);
        Assert.Equal(16, check.MaxDropped);
        Assert.Equal(17, run.Coordinator.StepDropouts);
        Assert.Equal(17, run.Coordinator.Rejoins);
        Assert.Contains(check.Events, e => e.Kind == EventKind.StepDropout && e.Households.SequenceEqual([0]) && e.Detail.Contains("recovery shares", StringComparison.Ordinal));
        Assert.True(scheme.AbandonedSums > 0);
    }

    [Fact]
    public void The_kept_count_follows_the_flags_when_masked_uploads_drop_missing_and_silent_participants()
    {
        // At round 0's end 15 participants lose their masked uploads (dropped at the upload deadline) and one uploader
        // does not answer the recovery request (dropped at the recovery deadline); all come back at round 1's start.
        var scheme = new MaskedSumsScheme(ClearScheme.Plain(), maskUploads: true);
        var (run, check) = Drive(scheme, null,
            [.. Enumerable.Range(17, 15).Select(m => new ScriptedDropout(m, StepsPerRound - 1, DropoutPoint.BeforeUpload)),
                new ScriptedDropout(0, StepsPerRound - 1, DropoutPoint.BeforeRecoveryShares)]);
        Assert.Equal(16, check.MaxDropped); // all 16 out at the recovery deadline; back at round 1's start
        Assert.Equal(16, check.Households(EventKind.StepDropout));
        Assert.Equal(16, run.Coordinator.Rejoins);
        Assert.Equal(0, run.Coordinator.StepDropouts); // the upload deadline's drops are not step dropouts
        Assert.Equal(1, scheme.AbandonedUploadSums);
    }

    [Fact]
    public void Refused_messages_and_refused_rejoins_leave_the_kept_count_unchanged()
    {
        var check = new DroppedCountCheck();
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions
        {
            Federation = TestRuns.Options(stepsPerRound: StepsPerRound), ScriptedDropouts = [new ScriptedDropout(2, 1), new ScriptedDropout(6, 1)],
        }, check);
        check.Coordinator = run.Coordinator;
        Assert.True(run.StepOnce());
        Assert.True(run.StepOnce());
        Assert.Equal(2, run.Coordinator.DroppedCount);
        var outbox = new NullOutbox();
        HouseholdMessage[] refused =
        [
            new() { HouseholdIndex = 2, PartialSums = new PartialSums { Round = 0, Step = 2 } },   // from a dropped household
            new() { HouseholdIndex = 2, Rejoin = new RejoinRequest { LastRound = 0 } },           // a rejoin mid-round
            new() { HouseholdIndex = 4, Rejoin = new RejoinRequest { LastRound = 0 } },           // a rejoin of a household not dropped
            new() { HouseholdIndex = 6, ProjectionInputs = new ProjectionInputs { Round = 0, Step = 1 } },
        ];
        foreach (HouseholdMessage m in refused)
        {
            Assert.Throws<ProtocolException>(() => run.Coordinator.Receive(m, outbox));
            Assert.Equal(2, run.Coordinator.DroppedCount);
            Assert.True(run.Coordinator.IsDropped(2) && run.Coordinator.IsDropped(6) && !run.Coordinator.IsDropped(4));
        }
        // At the round's end both rejoin; a second rejoin of the same household is refused without a second decrement.
        while (run.StepCount < StepsPerRound)
        {
            Assert.True(run.StepOnce());
        }
        Assert.Equal(0, run.Coordinator.DroppedCount);
        Assert.Throws<ProtocolException>(() => run.Coordinator.Receive(new HouseholdMessage { HouseholdIndex = 2, Rejoin = new RejoinRequest { LastRound = 0 } }, outbox));
        Assert.Equal(0, run.Coordinator.DroppedCount);
        Assert.Empty(check.Mismatches);
    }

    [Fact]
    public void A_restored_snapshot_keeps_the_count_of_the_households_dropped_at_its_round_start()
    {
        // Households 4 and 9 drop in round 0 and do not come back: round 1 starts with both dropped; the snapshot written
        // there restores the flags and the count, and a rejoin on the restored machine brings the count down by one.
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions
        {
            Scheme = ClearScheme.Plain(), Federation = TestRuns.Options(stepsPerRound: StepsPerRound), ScriptedDropouts = [new ScriptedDropout(4, 3), new ScriptedDropout(9, StepsPerRound - 1)],
            RejoinAfterDropout = false,
        }, new RecordingTranscript());
        while (run.StepCount < StepsPerRound)
        {
            Assert.True(run.StepOnce());
        }
        Assert.True(run.Coordinator.AtRoundStart);
        Assert.Equal(2, run.Coordinator.DroppedCount);
        using var buffer = new MemoryStream();
        using (var w = new BinaryWriter(buffer, System.Text.Encoding.UTF8, leaveOpen: true))
        {
            run.Coordinator.WriteSnapshot(w);
        }
        var check = new DroppedCountCheck();
        var fresh = new Coordinator(InProcessFederation.CreateCoordinatorSetup(TestRuns.Default(),
            new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = TestRuns.Options(stepsPerRound: StepsPerRound) }, Training.HouseholdControlTask.FeaturesPerHousehold), check);
        buffer.Position = 0;
        fresh.RestoreSnapshot(new BinaryReader(buffer));
        check.Coordinator = fresh;
        Assert.Equal(2, fresh.DroppedCount);
        Assert.Equal(2, Flags(fresh));
        fresh.Receive(new HouseholdMessage { HouseholdIndex = 9, Rejoin = new RejoinRequest { LastRound = 0 } }, new NullOutbox());
        Assert.Equal(1, fresh.DroppedCount);
        Assert.True(fresh.IsDropped(4) && !fresh.IsDropped(9));
        Assert.Empty(check.Mismatches);
    }

    private sealed class NullOutbox : ICoordinatorOutbox
    {
        public void Send(CoordinatorMessage message)
        {
        }
    }
}
