using FedGrid.Federation.Coordination;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Grid.Projection;
using FedGrid.Households.Scenarios;

namespace FedGrid.Federation.Tests;

/// <summary>Per-step dropouts: the coordinator's step deadline, the projection's stand-in, rejoins, and masked-sums recovery or abandonment.</summary>
public sealed class StepDropoutTests
{
    private const int StepsPerRound = 48;

    private static (InProcessFederation Run, RecordingTranscript Sink, FederatedRunResult Result) Run(IFederationScheme scheme, params ScriptedDropout[] script)
    {
        var sink = new RecordingTranscript();
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions
        {
            Scheme = scheme,
            Federation = TestRuns.Options(stepsPerRound: StepsPerRound),
            ScriptedDropouts = script,
        }, sink);
        return (run, sink, run.Run());
    }

    private static IEnumerable<CoordinatorEvent> Events(RecordingTranscript sink, EventKind kind) =>
        sink.Records.Where(r => r.EntryCase == TranscriptRecord.EntryOneofCase.Event && r.Event.Kind == kind).Select(r => r.Event);

    [Fact]
    public void A_household_missing_a_step_is_dropped_for_the_round_the_others_go_on_and_it_rejoins_next_round()
    {
        var (run, sink, result) = Run(ClearScheme.Plain(),
            new ScriptedDropout(3, 10), new ScriptedDropout(5, 20, DropoutPoint.BeforeProjectionInputs));
        Assert.Equal(2, result.AggregatedRounds);
        Assert.Equal(2, run.Coordinator.StepDropouts);
        Assert.Equal(2, run.Coordinator.Rejoins);
        TranscriptRecord[] drops = [.. sink.Records.Where(r => r.EntryCase == TranscriptRecord.EntryOneofCase.Event && r.Event.Kind == EventKind.StepDropout)];
        Assert.Equal(2, drops.Length);
        Assert.Equal(10L, drops[0].Step);
        Assert.Equal([3], drops[0].Event.Households);
        Assert.Contains("partial sums", drops[0].Event.Detail, StringComparison.Ordinal);
        Assert.Equal(20L, drops[1].Step);
        Assert.Equal([5], drops[1].Event.Households);
        Assert.Contains("projection inputs", drops[1].Event.Detail, StringComparison.Ordinal);
        // Nothing more is sent to a dropped household in its round: no sums, no setpoints, no training call.
        Assert.DoesNotContain(sink.Records, r => r.Round == 0 && r.Sent is { } s && s.HouseholdIndex == 3 && r.Step >= 10 && s.BodyCase != CoordinatorMessage.BodyOneofCase.Model);
        Assert.DoesNotContain(sink.Records, r => r.Round == 0 && r.Sent is { } s && s.HouseholdIndex == 5 && (r.Step > 20 || s.BodyCase == CoordinatorMessage.BodyOneofCase.Training));
        Assert.DoesNotContain(sink.Records, r => r.Round == 0 && r.Sent is { BodyCase: CoordinatorMessage.BodyOneofCase.Training, HouseholdIndex: 3 });
        Assert.DoesNotContain(sink.Records, r => r.Round == 0 && r.Received is { } m && m.HouseholdIndex == 3 && r.Step >= 10);
        CoordinatorEvent selected = Events(sink, EventKind.RoundSelected).First();
        Assert.DoesNotContain(3, selected.Households);
        Assert.DoesNotContain(5, selected.Households);
        Assert.Contains("dropped", selected.Detail, StringComparison.Ordinal);
        // Both come back at round 1's start and send partial sums again.
        Assert.DoesNotContain(sink.Records, r => r.Kind() == RecordKind.Unknown);
        Assert.Equal(2, sink.Records.Count(r => r.Kind() == RecordKind.Rejoin));
        Assert.Equal([3, 5], Events(sink, EventKind.Rejoined).SelectMany(e => e.Households).ToArray());
        Assert.Contains(sink.Records, r => r.Round == 1 && r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.Rejoin, HouseholdIndex: 3 });
        Assert.Contains(sink.Records, r => r.Round == 1 && r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.PartialSums, HouseholdIndex: 3 });
        Assert.Equal(sink.Records.Count(r => r.Round == 1 && r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.PartialSums, HouseholdIndex: 0 }),
            sink.Records.Count(r => r.Round == 1 && r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.PartialSums, HouseholdIndex: 3 }));
    }

    [Fact]
    public void The_sums_reply_of_a_dropout_step_is_the_sum_over_the_households_that_sent()
    {
        var (_, sink, _) = Run(ClearScheme.Plain(), new ScriptedDropout(3, 10), new ScriptedDropout(17, 10));
        PartialSums[] received = [.. sink.Records.Where(r => r.Step == 10 && r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.PartialSums }).Select(r => r.Received!.PartialSums)];
        int[] senders = [.. sink.Records.Where(r => r.Step == 10 && r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.PartialSums }).Select(r => r.Received!.HouseholdIndex)];
        Assert.Equal(30, received.Length);
        Assert.DoesNotContain(3, senders);
        Assert.DoesNotContain(17, senders);
        // The reply to household 0: Σ over the other senders, accumulated in double precision in household order.
        SumsReply reply = sink.Records.Single(r => r.Step == 10 && r.Sent is { BodyCase: CoordinatorMessage.BodyOneofCase.Sums, HouseholdIndex: 0 }).Sent!.Sums;
        for (int i = 0; i < reply.Actor.Count; i++)
        {
            double total = 0;
            foreach (PartialSums p in received)
                total += p.Actor[i];
            Assert.Equal((float)(total - received[Array.IndexOf(senders, 0)].Actor[i]), reply.Actor[i]);
        }
        Assert.Equal(30, sink.Records.Count(r => r.Step == 10 && r.Sent is { BodyCase: CoordinatorMessage.BodyOneofCase.Sums }));
    }

    [Fact]
    public void The_projection_holds_a_dropped_household_at_its_last_reported_desired_power_and_base_load()
    {
        Scenario sc = TestRuns.Default();
        int n = sc.Households.Length;
        RegisteredHousehold[] registered = [.. sc.Households.Select((h, m) => new RegisteredHousehold(m, h.Id, h.BusId, h.KvarPerKw))];
        var fixedLoads = sc.FixedLoads.Select(f => (f.BusId, f.Kw, f.Kvar)).ToArray();
        var form = new HouseholdProjectionInputs();
        ICoordinatorProjectionSide withDropout = form.CreateCoordinatorSide(sc.Feeder, registered, fixedLoads, null);
        ICoordinatorProjectionSide reference = form.CreateCoordinatorSide(sc.Feeder, registered, fixedLoads, null);
        Assert.True(withDropout.SupportsDropouts);
        // A heavy evening (the feeder must curtail), then a step in which household 4 is missing.
        HouseholdMessage Inputs(int m, long step, double scale) => new()
        {
            HouseholdIndex = m,
            ProjectionInputs = new ProjectionInputs { Round = 0, Step = step, ProposalKw = scale * (6 + 0.5 * (m % 5)), FlexMinKw = 0.2, FlexMaxKw = scale * (6 + 0.5 * (m % 5)), BaseKw = scale * (1.5 + 0.1 * (m % 4)) },
        };
        withDropout.Begin();
        for (int m = 0; m < n; m++) Assert.True(withDropout.TryAdd(m, Inputs(m, 0, 1.0)));
        withDropout.Project();
        withDropout.Begin();
        for (int m = 0; m < n; m++) if (m != 4) Assert.True(withDropout.TryAdd(m, Inputs(m, 1, 0.9)));
        withDropout.AddDropped(4);
        double[] dropped = [.. withDropout.Project().SetpointKw];
        // Reference (same history, so the same warm start): household 4 reports a box pinned at its last desired power,
        // with its last base load.
        reference.Begin();
        for (int m = 0; m < n; m++) Assert.True(reference.TryAdd(m, Inputs(m, 0, 1.0)));
        reference.Project();
        reference.Begin();
        for (int m = 0; m < n; m++)
        {
            HouseholdMessage msg = Inputs(m, 1, 0.9);
            if (m == 4)
            {
                msg = Inputs(4, 1, 1.0);
                msg.ProjectionInputs.FlexMinKw = msg.ProjectionInputs.FlexMaxKw;
            }
            Assert.True(reference.TryAdd(m, msg));
        }
        ProjectionResult r = reference.Project();
        Assert.NotEqual(ProjectionStatus.AlreadyFeasible, r.Status);
        // Equal up to the order in which the bus's base loads are added (the stand-in comes after the reports).
        double[] expected = [.. r.SetpointKw];
        Assert.All(Enumerable.Range(0, n), m => Assert.True(Math.Abs(expected[m] - dropped[m]) < 1e-6, $"household {m}: {expected[m]} against {dropped[m]}"));
        Assert.Equal(6.0 + 0.5 * 4, dropped[4], 9);
        Assert.Throws<ProtocolException>(() => withDropout.AddDropped(5));
    }

    [Fact]
    public void Random_step_dropouts_are_seeded_and_the_run_completes()
    {
        FederatedRunResult Once(out InProcessFederation run, out RecordingTranscript sink)
        {
            sink = new RecordingTranscript();
            run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions
            {
                Scheme = ClearScheme.Plain(), Federation = TestRuns.Options(stepsPerRound: 24), StepDropout = 0.01,
            }, sink);
            return run.Run();
        }
        FederatedRunResult a = Once(out InProcessFederation ra, out RecordingTranscript sa);
        Once(out InProcessFederation rb, out _);
        Assert.Equal(4, a.Rounds);
        Assert.True(ra.Coordinator.StepDropouts >= 5, $"{ra.Coordinator.StepDropouts} dropouts");
        Assert.True(ra.Coordinator.Rejoins >= 1);
        Assert.Equal(ra.Coordinator.StepDropouts, rb.Coordinator.StepDropouts);
        Assert.Equal(ra.Coordinator.Actor.Parameters.ToArray(), rb.Coordinator.Actor.Parameters.ToArray());
        Assert.All(Events(sa, EventKind.StepDropout), e => Assert.NotEmpty(e.Households));
    }

    [Fact]
    public void Closing_a_step_needs_an_open_step_and_a_dropped_household_is_refused_until_it_rejoins()
    {
        var sink = new RecordingTranscript();
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Federation = TestRuns.Options(stepsPerRound: StepsPerRound), ScriptedDropouts = [new ScriptedDropout(2, 1)] }, sink);
        run.Start();
        Assert.False(run.Coordinator.StepOpen);
        Assert.Throws<ProtocolException>(() => run.Coordinator.CloseStep(new NullOutbox()));
        Assert.True(run.StepOnce());
        Assert.True(run.StepOnce());
        Assert.True(run.Coordinator.IsDropped(2));
        Assert.True(run.IsOffline(2));
        // A message from the dropped household is refused (and recorded), the state unchanged.
        var late = new HouseholdMessage { HouseholdIndex = 2, PartialSums = new PartialSums { Round = 0, Step = 2 } };
        var e = Assert.Throws<ProtocolException>(() => run.Coordinator.Receive(late, new NullOutbox()));
        Assert.Contains("dropped", e.Message, StringComparison.Ordinal);
        var rejoin = new HouseholdMessage { HouseholdIndex = 2, Rejoin = new RejoinRequest { LastRound = 0 } };
        e = Assert.Throws<ProtocolException>(() => run.Coordinator.Receive(rejoin, new NullOutbox()));
        Assert.Contains("under way", e.Message, StringComparison.Ordinal);
        Assert.True(run.StepOnce());
        Assert.Equal(CoordinatorPhase.CollectingPartialSums, run.Coordinator.Phase);
        // Bus-aggregate inputs cannot go on without a household of a bus: refused up front.
        var b = Assert.Throws<ArgumentException>(() => new InProcessFederation(TestRuns.Default(), new FederatedRunOptions
        {
            Federation = TestRuns.Options(), ProjectionForm = new BusAggregateProjectionInputs(), StepDropout = 0.1,
        }, new RecordingTranscript()));
        Assert.Contains("bus-aggregate", b.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void Masked_sums_recover_a_step_at_the_threshold_and_give_the_plain_model_with_the_same_dropouts()
    {
        // 32 households, threshold 17 (a majority): 15 drop at step 5, the 17 survivors' shares recover their masks.
        ScriptedDropout[] script = [.. Enumerable.Range(10, 15).Select(m => new ScriptedDropout(m, 5))];
        var scheme = new MaskedSumsScheme(ClearScheme.Plain());
        var (masked, sink, result) = Run(scheme, script);
        var (plain, _, _) = Run(ClearScheme.Plain(), script);
        Assert.Equal(2, result.AggregatedRounds);
        Assert.Equal(0, scheme.AbandonedSums);
        Assert.Equal(StepsPerRound - 5, scheme.RecoveredSums);
        TranscriptRecord recovered = sink.Records.Single(r => r.Event is { Kind: EventKind.SumRecovered });
        Assert.Equal(5, recovered.Step);
        Assert.Equal(Enumerable.Range(10, 15), recovered.Event.Households);
        // The survivors were asked, answered with one share of each dropped key, and got the total.
        Assert.Equal(17, sink.Records.Count(r => r.Sent is { BodyCase: CoordinatorMessage.BodyOneofCase.RecoveryRequest }));
        Assert.All(sink.Records.Where(r => r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.RecoveryShares }), r => Assert.Equal(15, r.Received!.RecoveryShares.Shares.Count));
        Assert.All(sink.Records.Where(r => r.Sent is { BodyCase: CoordinatorMessage.BodyOneofCase.Sums }), r => Assert.Equal(SumsKind.Total, r.Sent!.Sums.Kind));
        // Round 1: the 15 were excluded at the round's start, came back with fresh keys and shared them again.
        Assert.Contains(sink.Records, r => r.Round == 1 && r.Sent is { BodyCase: CoordinatorMessage.BodyOneofCase.MaskedKeys } s && s.MaskedKeys.Entries.Count(e => e.Excluded) == 15);
        Assert.Equal(15, sink.Records.Count(r => r.Round == 1 && r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.MaskedKeys }));
        Assert.Equal(15, sink.Records.Count(r => r.Round == 1 && r.Received is { BodyCase: HouseholdMessage.BodyOneofCase.KeyShares }));
        // The transcript reader knows every record of the exchange.
        Assert.DoesNotContain(sink.Records, r => r.Kind() == RecordKind.Unknown);
        // Keys: 32 received at admission and one directory broadcast; in round 1 one exclusion broadcast, then for the i-th
        // of the 15 rejoining households its keys received, an update to each of the 17 + i households online, and its
        // full directory.
        Assert.Equal(32 + 1 + 1 + Enumerable.Range(0, 15).Sum(i => 1 + 17 + i + 1), sink.Records.Count(r => r.Kind() == RecordKind.MaskedKeys));
        Assert.Equal(17 * 2, sink.Records.Count(r => r.Kind() == RecordKind.Recovery));
        // Same dropouts, same seed: the plain model up to fixed-point rounding (issue 7: at most 1e-6 relative).
        ParameterAssert.Close(plain.Coordinator.Actor.Parameters, masked.Coordinator.Actor.Parameters, "actor");
        ParameterAssert.Close(plain.Coordinator.Critic.Parameters, masked.Coordinator.Critic.Parameters, "critic");
    }

    [Fact]
    public void Masked_sums_below_the_threshold_abandon_the_rest_of_the_round_never_mis_sum_and_recover_next_round()
    {
        // 16 drop at step 5: 16 survivors, below the threshold of 17.
        var scheme = new MaskedSumsScheme(ClearScheme.Plain());
        var (_, sink, result) = Run(scheme, [.. Enumerable.Range(0, 16).Select(m => new ScriptedDropout(2 * m, 5))]);
        Assert.Equal(2, result.Rounds);
        Assert.Equal(StepsPerRound - 5, scheme.AbandonedSums);
        Assert.Equal(0, scheme.RecoveredSums);
        TranscriptRecord abandoned = sink.Records.First(r => r.Event is { Kind: EventKind.SumAbandoned });
        Assert.Equal(5, abandoned.Step);
        Assert.Equal(16, abandoned.Event.Households.Count);
        Assert.Contains("survived", abandoned.Event.Detail, StringComparison.Ordinal);
        Assert.Equal(StepsPerRound - 5, sink.Records.Count(r => r.Event is { Kind: EventKind.SumAbandoned }));
        // Never a total from step 5 to the round's end; totals again in round 1.
        SumsReply[] round0 = [.. sink.Records.Where(r => r.Round == 0 && r.Step >= 5 && r.Sent is { BodyCase: CoordinatorMessage.BodyOneofCase.Sums }).Select(r => r.Sent!.Sums)];
        Assert.Equal(16 * (StepsPerRound - 5), round0.Length);
        Assert.All(round0, s => { Assert.Equal(SumsKind.Abandoned, s.Kind); Assert.Empty(s.TotalActor); });
        SumsReply[] round1 = [.. sink.Records.Where(r => r.Round == 1 && r.Sent is { BodyCase: CoordinatorMessage.BodyOneofCase.Sums }).Select(r => r.Sent!.Sums)];
        Assert.Equal(32 * StepsPerRound, round1.Length);
        Assert.All(round1, s => Assert.Equal(SumsKind.Total, s.Kind));
    }

    [Fact]
    public void Masked_sums_abandon_when_survivors_are_enough_but_one_withholds_its_shares()
    {
        // 15 drop at step 5 (17 survivors = the threshold), and one survivor goes offline before answering the request.
        var scheme = new MaskedSumsScheme(ClearScheme.Plain());
        var (run, sink, _) = Run(scheme, [.. Enumerable.Range(10, 15).Select(m => new ScriptedDropout(m, 5)), new ScriptedDropout(0, 5, DropoutPoint.BeforeRecoveryShares)]);
        TranscriptRecord[] drops = [.. sink.Records.Where(r => r.Event is { Kind: EventKind.StepDropout })];
        Assert.Equal(2, drops.Length);
        Assert.Equal([0], drops[1].Event.Households);
        Assert.Contains("recovery shares", drops[1].Event.Detail, StringComparison.Ordinal);
        TranscriptRecord abandoned = sink.Records.First(r => r.Event is { Kind: EventKind.SumAbandoned });
        Assert.Equal(5, abandoned.Step);
        Assert.Contains("fewer than 17 shares", abandoned.Event.Detail, StringComparison.Ordinal);
        Assert.Equal(StepsPerRound - 5, scheme.AbandonedSums);
        Assert.Equal(16, run.Coordinator.Rejoins);
    }

    [Fact]
    public void A_key_share_decrypts_only_for_its_holder_and_detects_tampering()
    {
        using MaskingKeyPair owner = MaskingKeyPair.Generate(), holder = MaskingKeyPair.Generate(), other = MaskingKeyPair.Generate();
        byte[] session = [1, 2, 3, 4];
        var value = (System.Numerics.BigInteger.One << 520) + 12345;
        byte[] c = KeyShareCipher.Encrypt(owner, holder.PublicKey, session, 3, 7, value);
        Assert.Equal(KeyShareCipher.CiphertextBytes, c.Length);
        Assert.Equal(value, KeyShareCipher.Decrypt(holder, owner.PublicKey, session, 3, 7, c));
        Assert.Throws<ProtocolException>(() => KeyShareCipher.Decrypt(other, owner.PublicKey, session, 3, 7, c));
        Assert.Throws<ProtocolException>(() => KeyShareCipher.Decrypt(holder, owner.PublicKey, session, 7, 3, c));
        c[5] ^= 1;
        Assert.Throws<ProtocolException>(() => KeyShareCipher.Decrypt(holder, owner.PublicKey, session, 3, 7, c));
    }

    private sealed class NullOutbox : ICoordinatorOutbox
    {
        public void Send(CoordinatorMessage message)
        {
        }
    }
}
