using FedGrid.Federation.Privacy;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Tests;

/// <summary>Scheme masked-sums in a protocol run: the same model as plain up to fixed-point rounding, and masked vectors that look uniform.</summary>
public sealed class MaskedSumsSchemeTests
{
    [Fact]
    public void EverySchemeNameGivesItsScheme_AndUnknownNamesAreRefused()
    {
        foreach (string name in FederationSchemes.Names)
            Assert.Equal(name, FederationSchemes.FromName(name).Name);
        Assert.IsType<MaskedSumsScheme>(FederationSchemes.FromName(MaskedSumsScheme.SchemeName));
        var e = Assert.Throws<ArgumentException>(() => FederationSchemes.FromName("masked"));
        Assert.Contains("plain, private-columns, masked-sums, dp or dp-masked-sums", e.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void SameSeedGivesThePlainModelUpToFixedPointRounding()
    {
        // Issue 7: "same seed gives the same model as plain up to fixed-point rounding (at most 1e-6 relative)".
        var plain = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = TestRuns.Options(stepsPerRound: 48) }, new RecordingTranscript());
        plain.Run();
        var scheme = new MaskedSumsScheme(ClearScheme.Plain());
        var masked = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = scheme, Federation = TestRuns.Options(stepsPerRound: 48) }, new RecordingTranscript());
        FederatedRunResult r = masked.Run();
        Assert.Equal(MaskedSumsScheme.SchemeName, r.Scheme);
        Assert.Equal(96, scheme.CompletedSums);
        Assert.True(r.AggregatedRounds >= 2);
        ParameterAssert.Close(plain.Coordinator.Actor.Parameters, masked.Coordinator.Actor.Parameters, "actor");
        ParameterAssert.Close(plain.Coordinator.Critic.Parameters, masked.Coordinator.Critic.Parameters, "critic");
        // Training actually moved the parameters (the comparison is not of two untouched initialisations).
        var fresh = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = ClearScheme.Plain(), Federation = TestRuns.Options(stepsPerRound: 48) }, new RecordingTranscript());
        fresh.Start();
        Assert.False(fresh.Coordinator.Actor.Parameters.SequenceEqual(plain.Coordinator.Actor.Parameters));
    }

    [Fact]
    public void WithBusAggregateProjectionInputsTheMaskedModelIsThePlainOneUpToFixedPointRounding()
    {
        // Issue 7: bus-aggregate inputs are "combinable with every scheme"; masked sums must still give plain's model.
        FederatedRunOptions Options(IFederationScheme scheme) => new()
        {
            Scheme = scheme,
            Federation = TestRuns.Options(stepsPerRound: 48),
            ProjectionForm = new FedGrid.Federation.Protocol.BusAggregateProjectionInputs(),
        };
        var plain = new InProcessFederation(TestRuns.Default(), Options(ClearScheme.Plain()), new RecordingTranscript());
        FederatedRunResult p = plain.Run();
        var masked = new InProcessFederation(TestRuns.Default(), Options(new MaskedSumsScheme(ClearScheme.Plain())), new RecordingTranscript());
        FederatedRunResult r = masked.Run();
        Assert.True(r.AggregatedRounds >= 2);
        Assert.Equal(p.AggregatedRounds, r.AggregatedRounds);
        ParameterAssert.Close(plain.Coordinator.Actor.Parameters, masked.Coordinator.Actor.Parameters, "actor");
        ParameterAssert.Close(plain.Coordinator.Critic.Parameters, masked.Coordinator.Critic.Parameters, "critic");
        Assert.Equal(p.Run.Days[0].Cost, r.Run.Days[0].Cost, 6);
    }

    [Fact]
    public void TheCoordinatorReceivesNoClearPartialSumsAndOneMaskedVectorLooksUniform()
    {
        var sink = new RecordingTranscript();
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions { Scheme = new MaskedSumsScheme(ClearScheme.Plain()), Federation = TestRuns.Options() }, sink);
        run.Start();
        for (int s = 0; s < 8; s++)
        {
            Assert.True(run.StepOnce());
        }
        PartialSums[] sums = [.. sink.Records.Where(r => r.Kind() == RecordKind.PartialSums && r.Received!.HouseholdIndex == 0).Select(r => r.Received!.PartialSums)];
        Assert.Equal(8, sums.Length);
        Assert.All(sums, p => Assert.Empty(p.Actor));
        // Chi-square on the top 4 bits of household 0's masked words over 8 steps (actor and critic): 15 degrees of
        // freedom; 37.70 is the 0.001 upper critical value (NIST/SEMATECH e-Handbook of Statistical Methods, table 1.3.6.7.4).
        ulong[] words = [.. sums.SelectMany(p => p.MaskedActor.Concat(p.MaskedCritic))];
        Assert.True(words.Length >= 160, $"only {words.Length} masked words");
        var counts = new int[16];
        foreach (ulong w in words)
        {
            counts[(int)(w >> 60)]++;
        }
        double expected = words.Length / 16.0, chi2 = counts.Sum(c => (c - expected) * (c - expected) / expected);
        Assert.True(chi2 < 37.70, $"chi-square {chi2:F2} over {words.Length} words");
        // The clear partial sums are small fixed-point numbers: their top bits are all 0 or all 1, far from uniform.
        Assert.True(words.Count(w => w >> 60 is 0 or 15) < words.Length * 0.5);
    }
}
