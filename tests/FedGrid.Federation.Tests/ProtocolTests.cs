using FedGrid.Federation.Coordination;
using FedGrid.Federation.Households;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Tests;

public sealed class ProtocolTests
{
    private static string Letter(RecordKind k) => k switch
    {
        RecordKind.Join => "J",
        RecordKind.Accepted => "A",
        RecordKind.Model => "M",
        RecordKind.PartialSums => "p",
        RecordKind.Sums => "s",
        RecordKind.ProjectionInputs => "i",
        RecordKind.Setpoint => "f",
        RecordKind.Training => "T",
        RecordKind.Upload => "U",
        RecordKind.Event => "E",
        _ => "?",
    };

    private static string Collapse(IEnumerable<TranscriptRecord> records)
    {
        // Run-length code of the record kinds: "J1A1J1A1…" becomes groups like "JA×32".
        var letters = records.Select(r => Letter(r.Kind())).ToList();
        var parts = new List<string>();
        for (int i = 0; i < letters.Count;)
        {
            int j = i;
            while (j < letters.Count && letters[j] == letters[i]) j++;
            parts.Add(j - i == 1 ? letters[i] : $"{letters[i]}{j - i}");
            i = j;
        }
        return string.Join(" ", parts);
    }

    [Fact]
    public void MessagesFollowTheProtocolOrder()
    {
        var sink = new RecordingTranscript();
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = TestRuns.Options(stepsPerRound: 2) }, sink);
        run.Start();
        run.StepOnce();
        run.StepOnce();
        string order = Collapse(sink.Records);
        string admission = string.Join(" ", Enumerable.Repeat("J A", 32));
        // Admission (join, accepted ×32), initial models ×32, then per step: partial sums ×32, sums ×32, projection inputs ×32,
        // setpoints ×32; at the round end: selection event, training calls ×32, uploads ×32, aggregation event, one broadcast.
        string expected = $"{admission} M32 p32 s32 i32 f32 p32 s32 i32 f32 E T32 U32 E M";
        Assert.Equal(expected, order);
        // Steps and rounds on the records: step 0 then step 1, all in round 0; the broadcast is for round 1.
        Assert.All(sink.Records.Where(r => r.Kind() == RecordKind.PartialSums).Take(32), r => Assert.Equal(0, r.Step));
        Assert.All(sink.Records.Where(r => r.Kind() == RecordKind.Setpoint).Skip(32), r => Assert.Equal(1, r.Step));
        TranscriptRecord last = sink.Records[^1];
        Assert.Equal(-1, last.Sent.HouseholdIndex);
        Assert.Equal(1, last.Sent.Model.Round);
        Assert.True(last.Sent.Model.Aggregated);
        Assert.Equal(Enumerable.Range(0, 32), last.Sent.Model.Contributors);
        Assert.True(sink.Flushes >= 2, "the transcript is flushed after admission and at the round's end");
    }

    [Fact]
    public void FailedQuorumIsRecordedAndTheModelKept()
    {
        var sink = new RecordingTranscript();
        var fed = TestRuns.Options(stepsPerRound: 4, participation: 0.25, quorum: 6);
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = fed, UploadDropout = 0.3 }, sink);
        run.Start();
        float[] before = [];
        int failed = 0, aggregated = 0;
        for (int i = 0; i < 40; i++)
        {
            if (i % 4 == 3) before = run.Coordinator.Actor.Parameters.ToArray();
            run.StepOnce();
            if (i % 4 == 3)
            {
                TranscriptRecord broadcast = sink.Records[^1];
                Assert.Equal(RecordKind.Model, broadcast.Kind());
                var events = sink.Records.Where(r => r.Kind() == RecordKind.Event && r.Round == i / 4).Select(r => r.Event).ToList();
                Assert.Equal(EventKind.RoundSelected, events[0].Kind);
                Assert.Equal(8, events[0].Households.Count);
                if (events.Any(e => e.Kind == EventKind.QuorumFailed))
                {
                    failed++;
                    Assert.False(broadcast.Sent.Model.Aggregated);
                    Assert.Contains(events, e => e.Kind == EventKind.Dropout);
                    Assert.Equal(before, run.Coordinator.Actor.Parameters.ToArray());
                }
                else
                {
                    aggregated++;
                    Assert.True(broadcast.Sent.Model.Aggregated);
                    Assert.InRange(broadcast.Sent.Model.Contributors.Count, 6, 8);
                }
            }
        }
        Assert.True(failed > 0 && aggregated > 0, $"expected both outcomes in 10 rounds with 30 % upload loss; got {failed} failed, {aggregated} aggregated");
        Assert.Equal(failed, run.Coordinator.FailedRounds);
        // Only selected households were called to train.
        var calls = sink.Records.Where(r => r.Kind() == RecordKind.Training && r.Sent.Training.Selected).Count();
        Assert.Equal(10 * 8, calls);
    }

    [Fact]
    public void SameSeedGivesTheSameTranscript()
    {
        string dir = TestRuns.TempDir("determinism");
        string Run(string name, ulong seed)
        {
            string path = Path.Combine(dir, name);
            var fed = TestRuns.Options(stepsPerRound: 24, participation: 0.5) with { Learning = TestRuns.Options().Learning with { Seed = seed } };
            new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.PrivateColumns(), Federation = fed, TranscriptPath = path }).Run();
            return Convert.ToHexString(System.Security.Cryptography.SHA256.HashData(File.ReadAllBytes(path)));
        }
        Assert.Equal(Run("a.fgt", 7), Run("b.fgt", 7));
        Assert.NotEqual(Run("a.fgt", 7), Run("c.fgt", 8));
    }

    [Fact]
    public void MachinesRejectMessagesThatDoNotFit()
    {
        var scenario = TestRuns.Default();
        var fed = TestRuns.Options();
        var scheme = ClearScheme.Plain();
        var sink = new RecordingTranscript();
        var coordinator = new Coordinator(new CoordinatorSetup(scenario.Feeder, scenario.Households.Select(h => h.Id).ToArray(), 10, [], fed, scheme,
            new HouseholdProjectionInputs()), sink);
        var outbox = new ListOutbox();
        var h0 = scenario.Households[0];
        var agent = new HouseholdAgent(new HouseholdIdentity(h0.Id, h0.BusId, h0.KvarPerKw, 10), fed, scheme, 1);
        // A household cannot start a step before it is admitted and has a model.
        Assert.Throws<ProtocolException>(() => agent.BeginStep(0, new float[10], 0, 1, 0.5));
        coordinator.Receive(agent.Join(), outbox);
        Assert.Equal(HouseholdPhase.AwaitingAdmission, agent.Phase);
        // Twice the same household, and a household not on the roster: rejected, and recorded.
        int recorded = sink.Records.Count;
        Assert.Throws<ProtocolException>(() => coordinator.Receive(new HouseholdMessage { HouseholdIndex = -1, Join = new JoinRequest { HouseholdId = h0.Id, ProtocolVersion = 1, FeatureCount = 10, BusId = h0.BusId } }, outbox));
        Assert.Throws<ProtocolException>(() => coordinator.Receive(new HouseholdMessage { HouseholdIndex = -1, Join = new JoinRequest { HouseholdId = "H99", ProtocolVersion = 1, FeatureCount = 10, BusId = h0.BusId } }, outbox));
        Assert.Equal(recorded + 2, sink.Records.Count);
        // Partial sums before admission closed, from an unregistered index.
        Assert.Throws<ProtocolException>(() => coordinator.Receive(new HouseholdMessage { HouseholdIndex = 5, PartialSums = new PartialSums() }, outbox));
        Assert.Equal(CoordinatorPhase.Admitting, coordinator.Phase);
        // The household takes its admission; a sums reply now does not fit its phase.
        foreach (var m in outbox.Messages) agent.Receive(m);
        Assert.Equal(HouseholdPhase.AwaitingModel, agent.Phase);
        Assert.Throws<ProtocolException>(() => agent.Receive(new CoordinatorMessage { HouseholdIndex = 0, Sums = new SumsReply() }));
        Assert.Equal(HouseholdPhase.AwaitingModel, agent.Phase);
        // A model for the wrong round is refused.
        Assert.Throws<ProtocolException>(() => agent.Receive(new CoordinatorMessage { HouseholdIndex = 0, Model = new ModelBroadcast { Round = 3, Scope = ParameterScope.OwnColumnsAndShared } }));
        // A household that speaks another scheme is refused at admission.
        var other = new HouseholdAgent(new HouseholdIdentity(h0.Id, h0.BusId, h0.KvarPerKw, 10), fed, ClearScheme.PrivateColumns(), 1);
        other.Join();
        Assert.Throws<ProtocolException>(() => other.Receive(outbox.Messages[0]));
    }

    [Fact]
    public void WrongStepAndWrongSizesAreRejectedWithoutChangingTheStep()
    {
        var sink = new RecordingTranscript();
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = TestRuns.Options() }, sink);
        run.Start();
        var outbox = new ListOutbox();
        var sums = new PartialSums { Round = 0, Step = 0 };
        sums.Actor.AddRange(new float[63]);
        sums.Critic.AddRange(new float[64]);
        Assert.Throws<ProtocolException>(() => run.Coordinator.Receive(new HouseholdMessage { HouseholdIndex = 0, PartialSums = sums }, outbox));
        var late = new PartialSums { Round = 1, Step = 100 };
        Assert.Throws<ProtocolException>(() => run.Coordinator.Receive(new HouseholdMessage { HouseholdIndex = 0, PartialSums = late }, outbox));
        Assert.Empty(outbox.Messages);
        Assert.Equal(CoordinatorPhase.CollectingPartialSums, run.Coordinator.Phase);
        // The run goes on unharmed.
        Assert.True(run.StepOnce());
        Assert.Equal(1, run.StepCount);
    }

    [Fact]
    public void HouseholdDecisionStepAllocatesNothingAfterWarmUp()
    {
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = TestRuns.Options() }, new RecordingTranscript());
        run.Start();
        HouseholdAgent agent = run.Households[3];
        // Replay the coordinator's side by hand for this one household.
        var reply = new CoordinatorMessage { HouseholdIndex = 3, Sums = new SumsReply { Kind = SumsKind.Others } };
        reply.Sums.Actor.AddRange(new float[64]);
        reply.Sums.Critic.AddRange(new float[64]);
        var setpoint = new CoordinatorMessage { HouseholdIndex = 3, Setpoint = new FinalSetpoint { SetpointKw = 0.5 } };
        Assert.Equal(0, TestRuns.AllocatedByDecisionSteps(agent, reply, setpoint, step => setpoint.Setpoint.Step = step));
    }

    private sealed class ListOutbox : ICoordinatorOutbox
    {
        public List<CoordinatorMessage> Messages { get; } = [];

        public void Send(CoordinatorMessage message) => Messages.Add(message.Clone());
    }
}
