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
}
