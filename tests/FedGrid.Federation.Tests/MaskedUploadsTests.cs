using FedGrid.Federation.Privacy;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Grid.Numerics;

namespace FedGrid.Federation.Tests;

/// <summary>
/// Masked uploads (issue 7: "Partial sums (and, as an option, uploads) are encoded in fixed point in a ring of 2^64 …
/// masked with pairwise masks that cancel in the sum"): the masks among a round's participants cancel exactly, are
/// their own streams, a run gives the unmasked run's model, dropouts during the upload are recovered at the threshold
/// and abandoned below it, and the combinations that cannot work are refused.
/// </summary>
public sealed class MaskedUploadsTests
{
    private const int RoundSteps = 48;

    private static FixedPointEncoding UploadEncoding(int n) => new(MaskedSumsScheme.MaxAbsUploadValue, n, MaskedSumsScheme.UploadFractionalBits(n));

    [Fact]
    public void TheUploadEncodingHasTheDocumentedScaleAndBound()
    {
        // 62 − ⌈log2 32⌉ − 20 = 37 fractional bits; 32 · (2^20 · 2^37 + 1) < 2^63 (the encoding's own check).
        Assert.Equal(37, MaskedSumsScheme.UploadFractionalBits(32));
        FixedPointEncoding e = UploadEncoding(32);
        Assert.Equal(Math.Pow(2, -37), e.Resolution);
        Assert.Throws<OverflowException>(() => e.Encode(MaskedSumsScheme.MaxAbsUploadValue * 1.0001));
    }

    [Fact]
    public void UploadMasksAmongTheParticipantsCancelExactly_AndADroppedParticipantIsRecoveredAtTheThreshold()
    {
        const int n = 7, t = 4, length = 41, round = 3;
        MaskingKeyPair[] keys = PrivacyTestKeys.Households(n, 77);
        byte[][] pub = PrivacyTestKeys.PublicKeys(keys);
        FixedPointEncoding enc = UploadEncoding(n);
        PairwiseMasker[] maskers = [.. keys.Select((k, m) => new PairwiseMasker(m, k, pub, PrivacyTestKeys.Session, new FixedPointEncoding(1024, n), 8))];
        ShamirShare[][] shares = [.. keys.Select(k => k.SharePrivateScalar(n, t))];
        bool[] participants = [true, true, false, true, true, true, false]; // 2 and 6 not called this round
        var random = new SeededRandom(5);
        double[][] x = [.. Enumerable.Range(0, n).Select(_ => Enumerable.Range(0, length).Select(_ => random.NextDouble(-5000, 5000)).ToArray())];
        MaskContext context = MaskedSumsScheme.UploadContext(round);

        ulong[] MaskedOf(int m)
        {
            var words = new ulong[length];
            enc.Encode(x[m], words);
            maskers[m].Reserve(length);
            maskers[m].AddMasks(context, words, participants);
            return words;
        }

        double[] Expected(IEnumerable<int> senders)
        {
            var sum = new ulong[length];
            var w = new ulong[length];
            foreach (int m in senders)
            {
                enc.Encode(x[m], w);
                FixedPointEncoding.AddWrapping(sum, w);
            }
            var d = new double[length];
            enc.Decode(sum, d);
            return d;
        }

        // Everyone called uploads: the masks cancel in the ring, bit for bit; the households not called are not missing.
        using (var unmasker = new MaskedSumUnmasker(pub, PrivacyTestKeys.Session, enc, t, length))
        {
            unmasker.Begin(context, length, participants);
            int[] senders = [0, 1, 3, 4, 5];
            foreach (int m in senders) unmasker.Add(m, MaskedOf(m));
            Assert.Empty(unmasker.Missing);
            var total = new double[length];
            Assert.Equal(MaskedSumStatus.Complete, unmasker.Complete(null, total).Status);
            Assert.Equal(Expected(senders), total);
            // One masked upload alone is nothing like its encoding.
            var clear = new ulong[length];
            enc.Encode(x[0], clear);
            Assert.True(MaskedOf(0).Zip(clear).Count(p => p.First == p.Second) == 0);
            // A household not called is refused.
            unmasker.Begin(context, length, participants);
            Assert.Throws<InvalidOperationException>(() => unmasker.Add(2, new ulong[length]));
        }

        // Participant 5 drops: 4 uploaders = t reveal their shares of its key; the survivors' total comes out exactly.
        using (var unmasker = new MaskedSumUnmasker(pub, PrivacyTestKeys.Session, enc, t, length))
        {
            unmasker.Begin(context, length, participants);
            int[] senders = [0, 1, 3, 4];
            foreach (int m in senders) unmasker.Add(m, MaskedOf(m));
            Assert.Equal([5], unmasker.Missing);
            var total = new double[length];
            var returned = new Dictionary<int, IReadOnlyList<ShamirShare>> { [5] = [.. senders.Select(k => shares[5][k])] };
            MaskedSumResult r = unmasker.Complete(returned, total);
            Assert.Equal(MaskedSumStatus.Recovered, r.Status);
            Assert.Equal(Expected(senders), total);
        }

        // Two participants drop: 3 uploaders < t, abandoned, no total.
        using (var unmasker = new MaskedSumUnmasker(pub, PrivacyTestKeys.Session, enc, t, length))
        {
            unmasker.Begin(context, length, participants);
            int[] senders = [0, 1, 3];
            foreach (int m in senders) unmasker.Add(m, MaskedOf(m));
            var total = new double[length];
            MaskedSumResult r = unmasker.Complete(new Dictionary<int, IReadOnlyList<ShamirShare>>(), total);
            Assert.Equal(MaskedSumStatus.Abandoned, r.Status);
            Assert.All(total, v => Assert.True(double.IsNaN(v)));
        }
        foreach (PairwiseMasker m in maskers) m.Dispose();
    }

    [Fact]
    public void UploadMasksAreStreamsOfTheirOwn_NeverAPartialSumsStream()
    {
        // Domain separation: the upload context (round r, step word 2^32 − 1, channel 2) is a counter nonce no decision
        // step (step < 2^32 − 1, channels 0 and 1) uses, so none of its AES-CTR blocks is one of theirs.
        MaskingKeyPair[] keys = PrivacyTestKeys.Households(2, 91);
        byte[] key = PairwiseMask.DeriveKey(keys[0], keys[1].PublicKey, PrivacyTestKeys.Session, 0, 1);
        using var stream = new AesCtr(key);
        const int words = 512;
        var stepWords = new HashSet<ulong>();
        var buffer = new ulong[words];
        for (int r = 0; r < 2; r++)
        {
            for (long s = r * RoundSteps; s < (r + 1) * RoundSteps; s++)
            {
                for (int c = 0; c < 2; c++)
                {
                    PairwiseMask.Generate(stream, new MaskContext(r, s, c), buffer);
                    stepWords.UnionWith(buffer);
                }
            }
        }
        Assert.Equal(2 * RoundSteps * 2 * words, stepWords.Count); // no repeats among the steps either
        var uploadWords = new HashSet<ulong>();
        for (int r = 0; r < 2; r++)
        {
            PairwiseMask.Generate(stream, MaskedSumsScheme.UploadContext(r), buffer);
            Assert.DoesNotContain(buffer, stepWords.Contains);
            uploadWords.UnionWith(buffer);
        }
        Assert.Equal(2 * words, uploadWords.Count);
    }

    private static FederatedRunOptions Options(IFederationScheme scheme, IReadOnlyList<ScriptedDropout>? dropouts = null) => new()
    {
        Scheme = scheme,
        Federation = TestRuns.Options(stepsPerRound: RoundSteps),
        ScriptedDropouts = dropouts ?? [],
    };

    [Fact]
    public void MaskedUploadsGiveTheUnmaskedModel_AndTheCoordinatorHoldsNoIndividualUpload()
    {
        // Issue 7 / brief: a masked-uploads run gives the same final model as the same run without (1e-6 relative).
        var clear = new InProcessFederation(TestRuns.Default(), Options(new MaskedSumsScheme(ClearScheme.Plain())), new RecordingTranscript());
        clear.Run();
        var scheme = new MaskedSumsScheme(ClearScheme.Plain(), maskUploads: true);
        var sink = new RecordingTranscript();
        var masked = new InProcessFederation(TestRuns.Default(), Options(scheme), sink);
        FederatedRunResult r = masked.Run();
        Assert.Equal(2, r.AggregatedRounds);
        Assert.Equal(2, scheme.CompletedUploadSums);
        Assert.False(scheme.ColumnsInUploads);
        // The first-layer columns and the output heads stay home under masked uploads: the households' own W_m and heads
        // are the model's.
        ParameterAssert.Close(clear.Coordinator.Actor.Parameters, WithOwnParts(masked, actor: true), "actor");
        ParameterAssert.Close(clear.Coordinator.Critic.Parameters, WithOwnParts(masked, actor: false), "critic");
        Assert.True(scheme.HeadsStayHome);
        Assert.Equal(clear.Days[0].Cost, masked.Days[0].Cost, 6);
        // Every upload in the transcript is masked ring words only; every training call names the participants.
        ParameterUpload[] uploads = [.. sink.Records.Where(x => x.Kind() == RecordKind.Upload).Select(x => x.Received!.Upload)];
        Assert.Equal(64, uploads.Length);
        int length = OutsideHeads(masked.Coordinator.Actor, true).Count + OutsideHeads(masked.Coordinator.Critic, false).Count + 1;
        Assert.All(uploads, u =>
        {
            Assert.Empty(u.ActorParameters);
            Assert.Empty(u.CriticParameters);
            Assert.Equal(0, u.SampleCount);
            Assert.Equal(ParameterScope.Shared, u.Scope);
            Assert.Equal(length, u.MaskedParameters.Count);
        });
        Assert.All(sink.Records.Where(x => x.Sent?.BodyCase == CoordinatorMessage.BodyOneofCase.Training).Select(x => x.Sent!.Training),
            c => Assert.Equal(Enumerable.Range(0, 32), c.Participants));
        // Chi-square on the top 4 bits of household 0's masked words (15 degrees of freedom; 37.70 is the 0.001 upper
        // critical value, NIST/SEMATECH e-Handbook of Statistical Methods, table 1.3.6.7.4).
        ulong[] words = [.. sink.Records.Where(x => x.Kind() == RecordKind.Upload && x.Received!.HouseholdIndex == 0).SelectMany(x => x.Received!.Upload.MaskedParameters)];
        var counts = new int[16];
        foreach (ulong w in words) counts[(int)(w >> 60)]++;
        double expected = words.Length / 16.0, chi2 = counts.Sum(c => (c - expected) * (c - expected) / expected);
        Assert.True(chi2 < 37.70, $"chi-square {chi2:F2} over {words.Length} words");
    }

    [Fact]
    public void DpOverMaskedSumsWithMaskedUploadsKeepsTheNoiseAndTheAggregate()
    {
        // The DP layer noises the update before the masks; masking changes neither the noise nor the aggregate of the shared
        // parameters (round 0, from the same model and the same draws). The heads differ by design: under masked uploads
        // each household keeps its own (clean) head instead of taking back its noisy upload.
        IFederationScheme Dp(bool mask) => FederationSchemes.FromName(DifferentiallyPrivateScheme.MaskedSchemeName, privacy: new DifferentialPrivacySettings(NoiseMultiplier: 0.5), maskUploads: mask);
        var clearSink = new RecordingTranscript();
        var clear = new InProcessFederation(TestRuns.Default(), Options(Dp(false)), clearSink);
        clear.Run();
        IFederationScheme scheme = Dp(true);
        var sink = new RecordingTranscript();
        var masked = new InProcessFederation(TestRuns.Default(), Options(scheme), sink);
        masked.Run();
        ModelBroadcast a = FirstAggregate(clearSink), b = FirstAggregate(sink);
        ParameterAssert.Close([.. OutsideHeads(a.ActorParameters, masked.Coordinator.Actor, true)], [.. OutsideHeads(b.ActorParameters, masked.Coordinator.Actor, true)], "actor");
        ParameterAssert.Close([.. OutsideHeads(a.CriticParameters, masked.Coordinator.Critic, false)], [.. OutsideHeads(b.CriticParameters, masked.Coordinator.Critic, false)], "critic");
        var dp = (DifferentiallyPrivateScheme)scheme;
        Assert.Equal(2 * 64, dp.UpdatesReleased); // still noised: two updates per upload
        Assert.True(dp.HeadsStayHome);
    }

    private static ScriptedDropout[] LostUploads(int count) =>
        [.. Enumerable.Range(32 - count, count).Select(m => new ScriptedDropout(m, RoundSteps - 1, DropoutPoint.BeforeUpload))];

    private static ModelBroadcast FirstAggregate(RecordingTranscript sink) =>
        sink.Records.Select(x => x.Sent).First(s => s?.BodyCase == CoordinatorMessage.BodyOneofCase.Model && s.Model.Round == 1 && s.HouseholdIndex == -1)!.Model;

    [Fact]
    public void UploadDropoutsAtTheThresholdAreRecovered_ToTheAggregateOfTheUploadsThatArrived()
    {
        // 32 households, threshold ⌊32/2⌋ + 1 = 17: 15 lose their round-0 upload, the 17 uploaders reveal their shares.
        var clearSink = new RecordingTranscript();
        var clear = new InProcessFederation(TestRuns.Default(), Options(new MaskedSumsScheme(ClearScheme.Plain()), LostUploads(15)), clearSink);
        clear.Run();
        var scheme = new MaskedSumsScheme(ClearScheme.Plain(), maskUploads: true);
        var sink = new RecordingTranscript();
        var masked = new InProcessFederation(TestRuns.Default(), Options(scheme, LostUploads(15)), sink);
        FederatedRunResult r = masked.Run();
        Assert.Equal(1, scheme.RecoveredUploadSums);
        Assert.Equal(2, r.AggregatedRounds);
        CoordinatorEvent recovered = sink.Records.Select(x => x.Event).Single(e => e?.Kind == EventKind.SumRecovered)!;
        Assert.Equal(Enumerable.Range(17, 15), recovered.Households);
        Assert.Equal(17, sink.Records.Count(x => x.Received?.BodyCase == HouseholdMessage.BodyOneofCase.RecoveryShares));
        // The round-0 aggregate is FedAvg over the 17 uploads that arrived, as without masks (the shared parameters outside
        // the output heads, which stay home under masked uploads).
        ModelBroadcast a = FirstAggregate(clearSink), b = FirstAggregate(sink);
        Assert.Equal(a.Contributors, b.Contributors);
        ParameterAssert.Close([.. OutsideHeads(a.ActorParameters, masked.Coordinator.Actor, true)], [.. OutsideHeads(b.ActorParameters, masked.Coordinator.Actor, true)], "actor broadcast");
        ParameterAssert.Close([.. OutsideHeads(a.CriticParameters, masked.Coordinator.Critic, false)], [.. OutsideHeads(b.CriticParameters, masked.Coordinator.Critic, false)], "critic broadcast");
        // The 15 came back with fresh keys and took part in round 1.
        Assert.Equal(15, masked.Coordinator.Rejoins);
    }

    [Fact]
    public void BelowTheThresholdTheRoundIsAbandonedAndRecorded_NeverMisSummed()
    {
        var scheme = new MaskedSumsScheme(ClearScheme.Plain(), maskUploads: true);
        var sink = new RecordingTranscript();
        var run = new InProcessFederation(TestRuns.Default(), Options(scheme, LostUploads(16)), sink);
        float[] before = [.. run.Coordinator.Actor.Parameters];
        FederatedRunResult r = run.Run();
        Assert.Equal(1, scheme.AbandonedUploadSums);
        Assert.Equal(1, r.FailedRounds);
        Assert.Equal(1, r.AggregatedRounds); // round 1 aggregates again
        Assert.Equal(0, sink.Records.Count(x => x.Received?.BodyCase == HouseholdMessage.BodyOneofCase.RecoveryShares)); // no key revealed for nothing
        CoordinatorEvent abandoned = sink.Records.Select(x => x.Event).Single(e => e?.Kind == EventKind.SumAbandoned)!;
        Assert.Contains("16 of 32 households survived", abandoned.Detail, StringComparison.Ordinal);
        ModelBroadcast kept = FirstAggregate(sink);
        Assert.False(kept.Aggregated);
        int offset = run.Coordinator.Actor.SharedRange().Offset;
        Assert.Equal(before.AsSpan(offset).ToArray(), kept.ActorParameters.ToArray()); // the model is kept, not a wrong sum

        // 15 lost plus one uploader withholding its shares: 16 shares < 17, abandoned.
        var scheme2 = new MaskedSumsScheme(ClearScheme.Plain(), maskUploads: true);
        var sink2 = new RecordingTranscript();
        var run2 = new InProcessFederation(TestRuns.Default(), Options(scheme2, [.. LostUploads(15), new ScriptedDropout(0, RoundSteps - 1, DropoutPoint.BeforeRecoveryShares)]), sink2);
        FederatedRunResult r2 = run2.Run();
        Assert.Equal(1, scheme2.AbandonedUploadSums);
        Assert.Equal(1, r2.FailedRounds);
        Assert.Contains("fewer than 17", sink2.Records.Select(x => x.Event).Single(e => e?.Kind == EventKind.SumAbandoned)!.Detail, StringComparison.Ordinal);
    }

    [Fact]
    public void CombinationsThatCannotWorkAreRefusedNamingTheOption()
    {
        foreach (string name in new[] { ClearScheme.PlainName, ClearScheme.PrivateColumnsName, DifferentiallyPrivateScheme.SchemeName })
        {
            var e = Assert.Throws<ArgumentException>(() => FederationSchemes.FromName(name, maskUploads: true));
            Assert.Contains("--mask-uploads", e.Message, StringComparison.Ordinal);
            Assert.Contains(name, e.Message, StringComparison.Ordinal);
        }
        foreach (string rule in new[] { CoordinateMedianAggregator.RuleName, TrimmedMeanAggregator.RuleName })
        {
            var e = Assert.Throws<ArgumentException>(() => FederationSchemes.FromName(MaskedSumsScheme.SchemeName, () => UploadAggregators.Create(rule, 0.1), maskUploads: true));
            Assert.Contains("--mask-uploads cannot be combined with --aggregation " + rule, e.Message, StringComparison.Ordinal);
        }
        Assert.True(((MaskedSumsScheme)FederationSchemes.FromName(MaskedSumsScheme.SchemeName, maskUploads: true)).MaskUploads);
        Assert.False(((MaskedSumsScheme)FederationSchemes.FromName(MaskedSumsScheme.SchemeName)).MaskUploads);
    }

    /// <summary>Outputs of one household's head: 2k for the actor, 1 for the critic (one head per household of the 32).</summary>
    private static int Outputs(FedGrid.Learning.Networks.DenseNetwork net) => net.Shape.OutputSize / 32;

    /// <summary>The positions of a network's shared part outside every household's output head.</summary>
    private static List<int> OutsideHeads(FedGrid.Learning.Networks.DenseNetwork net, bool actor)
    {
        UploadLayout layout = UploadLayout.Of(net, 32, Outputs(net));
        var head = new bool[layout.SharedLength];
        foreach (var ranges in layout.Heads)
            foreach ((int o, int n) in ranges)
                head.AsSpan(o, n).Fill(true);
        return [.. Enumerable.Range(0, head.Length).Where(i => !head[i])];
    }

    private static IEnumerable<float> OutsideHeads(IList<float> shared, FedGrid.Learning.Networks.DenseNetwork net, bool actor) =>
        OutsideHeads(net, actor).Select(i => shared[i]);

    /// <summary>The coordinator's parameters with each household's own first-layer columns and output head put in (they stay home under masked uploads).</summary>
    private static float[] WithOwnParts(InProcessFederation run, bool actor)
    {
        float[] p = [.. (actor ? run.Coordinator.Actor : run.Coordinator.Critic).Parameters];
        for (int m = 0; m < run.Households.Count; m++)
        {
            var net = actor ? run.Households[m].Actor : run.Households[m].Critic;
            foreach (var (o, n) in FedGrid.Federation.Coordination.Coordinator.OwnedRanges(net, m, Outputs(net)))
                net.Parameters.Slice(o, n).CopyTo(p.AsSpan(o, n));
        }
        return p;
    }
}
