using FedGrid.Federation.Privacy;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Wire;

namespace FedGrid.Federation.Tests;

public sealed class PrivacySchemeTests
{
    [Fact]
    public void DpSchemeSendsClippedNoisyPartialSumsAndDecodesAgainstThem()
    {
        var scheme = new DifferentiallyPrivateScheme(ClearScheme.PrivateColumns(), clipNorm: 1.0, noiseMultiplier: 0.5);
        Assert.Equal("dp", scheme.Name);
        Assert.False(scheme.ColumnsCrossWire);
        IHouseholdSchemeSide side = scheme.CreateHouseholdSide(0, 99);
        float[] actor = [3, 4, 0, 0], critic = [0.1f, 0.2f];
        var message = new PartialSums();
        side.EncodePartialSums(actor, critic, message);
        Assert.Equal(4, message.Actor.Count);
        Assert.Equal(2, message.Critic.Count);
        Assert.NotEqual(0.6f, message.Actor[0]); // clipped (3,4)→(0.6,0.8) plus N(0, 0.25) noise
        // The same seed gives the same noise (reproducible runs); another seed other noise.
        var again = new PartialSums();
        scheme.CreateHouseholdSide(0, 99).EncodePartialSums(actor, critic, again);
        Assert.Equal(message.Actor, again.Actor);
        var other = new PartialSums();
        scheme.CreateHouseholdSide(0, 100).EncodePartialSums(actor, critic, other);
        Assert.NotEqual(message.Actor, other.Actor);

        // A TOTAL reply is decoded against what was sent, so Σ_{k≠m} is exact for the noisy values.
        var reply = new SumsReply { Kind = SumsKind.Total };
        reply.Actor.Add([10, 10, 10, 10]);
        reply.Critic.Add([1, 1]);
        var otherActor = new float[4];
        var otherCritic = new float[2];
        side.DecodeSums(reply, actor, critic, otherActor, otherCritic);
        for (int i = 0; i < 4; i++)
        {
            Assert.Equal(10 - message.Actor[i], otherActor[i]);
        }
        Assert.Equal(1 - message.Critic[1], otherCritic[1]);
    }

    [Fact]
    public void DpSchemeNoiseHasTheStatedScale()
    {
        // Over 4000 steps of a zero vector, the sent values have standard deviation zC = 0.5·2 = 1 within 5 %
        // (sampling error of a standard deviation ≈ 1/√(2n) ≈ 0.8 %, common practice).
        var scheme = new DifferentiallyPrivateScheme(ClearScheme.PrivateColumns(), clipNorm: 2.0, noiseMultiplier: 0.5);
        IHouseholdSchemeSide side = scheme.CreateHouseholdSide(3, 7);
        var message = new PartialSums();
        double sq = 0;
        int n = 0;
        for (int step = 0; step < 4000; step++)
        {
            side.EncodePartialSums(new float[2], new float[1], message);
            foreach (float v in message.Actor.Concat(message.Critic))
            {
                sq += v * (double)v;
                n++;
            }
        }
        Assert.InRange(Math.Sqrt(sq / n), 0.95, 1.05);
        // Two releases per step, no subsampling: RDP 2T·α/(2z²).
        RenyiDpAccountant a = scheme.AccountPartialSums(10);
        Assert.Equal(20 * 4.0 / (2 * 0.25), a.Rdp[a.Orders.IndexOf(4.0)], 9);
    }

    [Fact]
    public void DpSchemeClipsAndNoisesTheUploadUpdateAgainstTheLoadedModel()
    {
        var scheme = new DifferentiallyPrivateScheme(ClearScheme.PrivateColumns(), new DifferentialPrivacySettings(NoiseMultiplier: 1e-6, ClipNorm: 1, UploadClipNorm: 0.5));
        IHouseholdSchemeSide side = scheme.CreateHouseholdSide(2, 11);
        float[] baseActor = [1, 2, 3], baseCritic = [-1, 0];
        var upload = new ParameterUpload();
        Assert.Throws<ProtocolException>(() => side.EncodeUpload(baseActor, baseCritic, upload)); // no broadcast model yet
        side.ModelLoaded(baseActor, baseCritic);
        // Actor update (3, 4, 0), norm 5 → clipped to 0.5: (0.3, 0.4, 0); critic update (0.1, 0) inside the norm: kept.
        side.EncodeUpload([4, 6, 3], [-0.9f, 0], upload);
        float[] sentActor = [.. upload.ActorParameters], sentCritic = [.. upload.CriticParameters];
        Assert.Equal([1.3f, 2.4f, 3f], sentActor.Select(v => MathF.Round(v, 4)));
        Assert.Equal([-0.9f, 0f], sentCritic.Select(v => MathF.Round(v, 4)));
        Assert.Equal(2, scheme.UpdatesReleased);
        Assert.Equal(1, scheme.UpdatesClipped);
        Assert.Throws<ProtocolException>(() => side.EncodeUpload([1, 2], baseCritic, upload)); // not the loaded model's size

        // The noise on the update has standard deviation z·C_u: 0.5 at z = 1 over 20 000 coordinates (within 3 %,
        // sampling error of a standard deviation ≈ 1/√(2n) = 0.5 %, common practice).
        var noisy = new DifferentiallyPrivateScheme(ClearScheme.PrivateColumns(), new DifferentialPrivacySettings(NoiseMultiplier: 1, ClipNorm: 1, UploadClipNorm: 0.5));
        IHouseholdSchemeSide n = noisy.CreateHouseholdSide(0, 5);
        var zeros = new float[20_000];
        n.ModelLoaded(zeros, [0]);
        n.EncodeUpload(zeros, [0], upload);
        double sq = upload.ActorParameters.Sum(v => (double)v * v);
        Assert.InRange(Math.Sqrt(sq / zeros.Length), 0.485, 0.515);
    }

    [Fact]
    public void DpSchemeRefusesColumnsThatCrossTheWireAndNamesItsMaskedForm()
    {
        var e = Assert.Throws<ArgumentException>(() => new DifferentiallyPrivateScheme(ClearScheme.Plain(), clipNorm: 1, noiseMultiplier: 1));
        Assert.Contains("'plain' sends them", e.Message);
        Assert.Throws<ArgumentOutOfRangeException>(() => new DifferentiallyPrivateScheme(ClearScheme.PrivateColumns(), clipNorm: 1, noiseMultiplier: 0));
        Assert.Equal("dp-masked-sums", FederationSchemes.FromName("dp-masked-sums").Name);
        Assert.IsType<MaskedSumsScheme>(((DifferentiallyPrivateScheme)FederationSchemes.FromName("dp-masked-sums")).Inner);
        // Partial sums and uploads compose: 2·(steps + rounds) releases at z, RDP α/(2z²) each.
        var scheme = new DifferentiallyPrivateScheme(ClearScheme.PrivateColumns(), clipNorm: 1, noiseMultiplier: 2);
        RenyiDpAccountant a = scheme.Account(96, 4);
        Assert.Equal(200 * 3.0 / 8, a.Rdp[a.Orders.IndexOf(3.0)], 9);
    }
}
