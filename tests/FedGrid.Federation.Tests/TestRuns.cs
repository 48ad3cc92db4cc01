using FedGrid.Federation.Households;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Households.Scenarios;

namespace FedGrid.Federation.Tests;

/// <summary>Keeps a copy of every transcript record in memory.</summary>
internal sealed class RecordingTranscript : ITranscriptSink
{
    public List<TranscriptRecord> Records { get; } = [];

    public int Flushes { get; private set; }

    public void Received(int round, long step, HouseholdMessage message) =>
        Records.Add(new TranscriptRecord { Sequence = (ulong)Records.Count, Round = round, Step = step, Received = message.Clone() });

    public void Sent(int round, long step, CoordinatorMessage message) =>
        Records.Add(new TranscriptRecord { Sequence = (ulong)Records.Count, Round = round, Step = step, Sent = message.Clone() });

    public void Event(int round, long step, CoordinatorEvent coordinatorEvent) =>
        Records.Add(new TranscriptRecord { Sequence = (ulong)Records.Count, Round = round, Step = step, Event = coordinatorEvent.Clone() });

    public void Flush() => Flushes++;
}

internal static class TestRuns
{
    /// <summary>The default scenario (32 households on the invented feeder) for <paramref name="days"/> days.</summary>
    public static Scenario Default(int days = 1) => DefaultScenario.Create(DefaultScenario.DefaultSeed, days);

    public static FederationOptions Options(int stepsPerRound = 96, double participation = 1, int quorum = 1) => new()
    {
        Learning = TrainingDefaults.ActorCritic with { Seed = 7 },
        StepsPerRound = stepsPerRound,
        Participation = participation,
        MinQuorum = quorum,
    };

    public static string TempDir(string name) => Directory.CreateTempSubdirectory("fedgrid-" + name).FullName;

    /// <summary>Drives one household through decision steps by hand (the coordinator's sums reply, then its final
    /// message for the step), 10 to warm up and 80 measured, and returns the bytes those 80 allocated.</summary>
    /// <param name="agent">The household.</param>
    /// <param name="reply">The sums reply, reused every step.</param>
    /// <param name="final">The message that ends the step (setpoint or bus correction), reused every step.</param>
    /// <param name="stampFinal">Sets <paramref name="final"/>'s step number.</param>
    /// <returns>Bytes allocated on this thread by the measured steps.</returns>
    public static long AllocatedByDecisionSteps(HouseholdAgent agent, CoordinatorMessage reply, CoordinatorMessage final, Action<long> stampFinal)
    {
        float[] x = new float[HouseholdControlTask.FeaturesPerHousehold];
        void OneStep(long step)
        {
            agent.BeginStep(step, x, 0, 1, 0.4);
            reply.Sums.Step = step;
            agent.Receive(reply);
            stampFinal(step);
            agent.Receive(final);
            agent.CompleteStep(0.1);
        }
        for (long s = 0; s < 10; s++) OneStep(s);
        long before = GC.GetAllocatedBytesForCurrentThread();
        for (long s = 10; s < 90; s++) OneStep(s);
        return GC.GetAllocatedBytesForCurrentThread() - before;
    }
}
