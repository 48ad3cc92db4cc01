using BenchmarkDotNet.Attributes;
using FedGrid.Federation.Privacy;
using FedGrid.Grid.Numerics;

namespace FedGrid.Bench;

/// <summary>
/// Masked sums per household per decision step for a first-layer-sized vector (64 partial sums) among 32 households:
/// masking (encode + 31 pair masks from AES-256-CTR), the coordinator's unmasking of a full step (32 additions and the
/// decode), the same with 2 dropouts whose keys were already rebuilt (62 extra pair masks removed), and the one-off
/// key agreement of one household (31 P-256 ECDH + HKDF). Reference points: plain encoding only.
/// Goal (issue 7): µs and bytes per household per step; 0 B allocated per step.
/// </summary>
[MemoryDiagnoser]
public class PrivacyBenchmarks
{
    private const int Households = 32, Length = 64;
    private MaskingKeyPair[] _keys = null!;
    private byte[][] _public = null!;
    private PairwiseMasker[] _maskers = null!;
    private MaskedSumUnmasker _unmasker = null!, _recovering = null!;
    private FixedPointEncoding _encoding = null!;
    private float[] _x = null!;
    private ulong[] _masked = null!;
    private ulong[][] _all = null!;
    private double[] _total = null!;
    private long _step;
    private static readonly byte[] Session = "bench session"u8.ToArray();

    [GlobalSetup]
    public void Setup()
    {
        var random = new SeededRandom(3);
        _encoding = new FixedPointEncoding(1000, Households);
        _keys = [.. Enumerable.Range(0, Households).Select(_ => MaskingKeyPair.Generate())];
        _public = [.. _keys.Select(k => k.PublicKey)];
        _maskers = [.. _keys.Select((k, m) => new PairwiseMasker(m, k, _public, Session, _encoding, Length))];
        _x = [.. Enumerable.Range(0, Length).Select(_ => (float)random.NextDouble(-10, 10))];
        _masked = new ulong[Length];
        _all = [.. Enumerable.Range(0, Households).Select(m => { var v = new ulong[Length]; _maskers[m].Mask(new MaskContext(0, 0, 0), _x, v); return v; })];
        _total = new double[Length];
        _unmasker = new MaskedSumUnmasker(_public, Session, _encoding, 17, Length);
        // A coordinator that already rebuilt households 30 and 31 (dropped earlier in the round).
        _recovering = new MaskedSumUnmasker(_public, Session, _encoding, 17, Length);
        ShamirShare[][] shares = [.. _keys.Select(k => k.SharePrivateScalar(Households, 17))];
        _recovering.Begin(new MaskContext(0, 0, 0), Length);
        for (int m = 0; m < Households - 2; m++)
        {
            _recovering.Add(m, _all[m]);
        }
        var returned = new Dictionary<int, IReadOnlyList<ShamirShare>>
        {
            [30] = [.. shares[30].Take(30)],
            [31] = [.. shares[31].Take(30)],
        };
        if (_recovering.Complete(returned, _total).Status != MaskedSumStatus.Recovered)
        {
            throw new InvalidOperationException("bench setup: recovery failed");
        }
    }

    /// <summary>Reference: fixed-point encoding alone (what masking costs on top of it is the pair masks).</summary>
    [Benchmark(Baseline = true)]
    public void EncodeOnly() => _encoding.Encode(_x, _masked);

    /// <summary>One household masks its 64 partial sums for one decision step (31 pair masks).</summary>
    [Benchmark]
    public void MaskOneHouseholdStep() => _maskers[0].Mask(new MaskContext(0, ++_step & 0xffff_ffff, 0), _x, _masked);

    /// <summary>The coordinator sums and decodes one step of 32 masked vectors (divide by 32 for per household).</summary>
    [Benchmark]
    public void UnmaskStepAllPresent()
    {
        _unmasker.Begin(new MaskContext(0, 0, 0), Length);
        for (int m = 0; m < Households; m++)
        {
            _unmasker.Add(m, _all[m]);
        }
        _unmasker.Complete(null, _total);
    }

    /// <summary>The same step with 2 households missing whose keys were rebuilt earlier (60 pair masks removed).</summary>
    [Benchmark]
    public void UnmaskStepTwoDropped()
    {
        _recovering.Begin(new MaskContext(0, 0, 0), Length);
        for (int m = 0; m < Households - 2; m++)
        {
            _recovering.Add(m, _all[m]);
        }
        _recovering.Complete(null, _total);
    }

    /// <summary>One household's key agreement at the start of a session (31 ECDH + HKDF + AES key schedules).</summary>
    [Benchmark]
    public void KeyAgreementOneHousehold()
    {
        using var masker = new PairwiseMasker(0, _keys[0], _public, Session, _encoding, Length);
    }
}
