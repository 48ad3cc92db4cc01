using BenchmarkDotNet.Attributes;
using FedGrid.Federation.Coordination;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Grid.Numerics;
using FedGrid.Learning.Networks;

namespace FedGrid.Bench;

/// <summary>
/// Masked uploads, once per household per round, on the default run's sizes (32 households, the actor's and critic's
/// shared parts of <see cref="TrainingDefaults.ActorCritic"/> outside the output heads, plus the sample count): a household encodes its upload in
/// the uploads' fixed point (2^20 bound, 37 fractional bits) and adds 31 pair masks (AES-256-CTR, the upload context);
/// the coordinator sums the 32 masked uploads in the ring and decodes the total (per household: divided by 32).
/// Reference: the fixed-point encoding alone. Setup prints the wire bytes of one upload, masked against plain floats.
/// Goal (brief of the masked-uploads option): µs and bytes per household per round, and the wire-bytes ratio.
/// </summary>
[MemoryDiagnoser]
public class MaskedUploadsBenchmarks
{
    private const int Households = 32;
    private PairwiseMasker[] _maskers = null!;
    private MaskedSumUnmasker _unmasker = null!;
    private FixedPointEncoding _encoding = null!;
    private double[] _values = null!, _total = null!;
    private ulong[] _words = null!;
    private ulong[][] _all = null!;
    private bool[] _participants = null!;
    private int _round;
    private static readonly byte[] Session = "bench session"u8.ToArray();

    /// <summary>Words of one masked upload (actor shared + critic shared + 1).</summary>
    public int Length { get; private set; }

    [GlobalSetup]
    public void Setup()
    {
        var (actor, critic) = Coordinator.Shapes(Households, HouseholdControlTask.FeaturesPerHousehold, TrainingDefaults.ActorCritic);
        // The masked vector: the shared parameters outside the households' output heads (they stay home), and the count.
        int na = Outside(new DenseNetwork(actor)), nc = Outside(new DenseNetwork(critic));
        Length = na + nc + 1;
        var random = new SeededRandom(11);
        _encoding = new FixedPointEncoding(MaskedSumsScheme.MaxAbsUploadValue, Households, MaskedSumsScheme.UploadFractionalBits(Households));
        MaskingKeyPair[] keys = [.. Enumerable.Range(0, Households).Select(_ => MaskingKeyPair.Generate())];
        byte[][] pub = [.. keys.Select(k => k.PublicKey)];
        _maskers = [.. keys.Select((k, m) => new PairwiseMasker(m, k, pub, Session, new FixedPointEncoding(MaskedSumsScheme.MaxAbsValue, Households, MaskedSumsScheme.FractionalBits(Households)), 128))];
        foreach (PairwiseMasker p in _maskers)
        {
            p.Reserve(Length);
        }
        // A weighted update: 96 samples times a step of order 1e-3.
        _values = [.. Enumerable.Range(0, Length).Select(_ => 96 * random.NextDouble(-1e-3, 1e-3))];
        _values[^1] = 96;
        _words = new ulong[Length];
        _participants = Enumerable.Repeat(true, Households).ToArray();
        _all = [.. Enumerable.Range(0, Households).Select(m =>
        {
            var v = new ulong[Length];
            _encoding.Encode(_values, v);
            _maskers[m].AddMasks(MaskedSumsScheme.UploadContext(0), v, _participants);
            return v;
        })];
        _total = new double[Length];
        _unmasker = new MaskedSumUnmasker(pub, Session, _encoding, MaskedSumsScheme.DefaultThreshold(Households), Length);
        var masked = new FedGrid.Federation.Wire.ParameterUpload { Round = 0, Scope = FedGrid.Federation.Wire.ParameterScope.Shared };
        masked.MaskedParameters.AddRange(_all[0]);
        var plain = new FedGrid.Federation.Wire.ParameterUpload { Round = 0, SampleCount = 96, Scope = FedGrid.Federation.Wire.ParameterScope.Shared };
        plain.ActorParameters.AddRange(Enumerable.Range(0, na).Select(i => (float)_values[i]));
        plain.CriticParameters.AddRange(Enumerable.Range(0, nc).Select(i => (float)_values[na + i]));
        Console.Error.WriteLine(FormattableString.Invariant(
            $"masked-uploads bench: {Length} words; upload message {masked.CalculateSize()} B masked, {plain.CalculateSize()} B plain (ratio {masked.CalculateSize() / (double)plain.CalculateSize():F3})"));
    }

    private static int Outside(DenseNetwork network)
    {
        UploadLayout layout = UploadLayout.Of(network, Households, network.Shape.OutputSize / Households);
        return layout.SharedLength - layout.Heads.Sum(h => h.Sum(r => r.Length));
    }

    /// <summary>Reference: the uploads' fixed-point encoding alone.</summary>
    [Benchmark(Baseline = true)]
    public void EncodeUploadOnly() => _encoding.Encode(_values, _words);

    /// <summary>One household encodes and masks its upload for a round (31 pair masks over the whole vector).</summary>
    [Benchmark]
    public void MaskOneHouseholdUpload()
    {
        _encoding.Encode(_values, _words);
        _maskers[0].AddMasks(MaskedSumsScheme.UploadContext(++_round & 0x7fff_ffff), _words, _participants);
    }

    /// <summary>The coordinator sums and decodes one round's 32 masked uploads, per household.</summary>
    [Benchmark(OperationsPerInvoke = Households)]
    public void UnmaskRoundAllPresent()
    {
        _unmasker.Begin(MaskedSumsScheme.UploadContext(0), Length, _participants);
        for (int m = 0; m < Households; m++)
        {
            _unmasker.Add(m, _all[m]);
        }
        if (_unmasker.Complete(null, _total).Status != MaskedSumStatus.Complete)
        {
            throw new InvalidOperationException("bench: the masks did not cancel");
        }
    }
}
