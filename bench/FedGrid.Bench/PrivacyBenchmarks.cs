using BenchmarkDotNet.Attributes;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Schemes;
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

/// <summary>
/// The <c>masked-sums</c> scheme's own per-step work on the default run's sizes (32 households, 64 actor and 64 critic
/// partial sums each), through the scheme sides the protocol calls: a household masking its step (fixed point, 2 × 31 pair
/// masks, the message's repeated fields), a household removing its own part from the returned totals, and the
/// coordinator's combining of one step (32 adds of 2 masked vectors, decode, 32 replies) counted per household. Reference:
/// the same household call under <c>plain</c> (floats copied into the message). Goal (issue 7): µs and bytes per
/// household per step.
/// </summary>
[MemoryDiagnoser]
public class MaskedSumsSchemeBenchmarks
{
    private const int Households = 32, Length = 64;
    private IHouseholdSchemeSide[] _sides = null!;
    private IHouseholdSchemeSide _plain = null!;
    private IPartialSumsCombiner _combiner = null!;
    private FedGrid.Federation.Wire.PartialSums[] _messages = null!;
    private FedGrid.Federation.Wire.PartialSums _own = null!, _plainMessage = null!;
    private FedGrid.Federation.Wire.SumsReply _reply = null!;
    private float[] _actor = null!, _critic = null!, _otherActor = null!, _otherCritic = null!;
    private long _step;

    [GlobalSetup]
    public void Setup()
    {
        var random = new SeededRandom(9);
        var scheme = new MaskedSumsScheme();
        _combiner = scheme.CreateCoordinatorSide(Households, Length, Length).PartialSums;
        _sides = [.. Enumerable.Range(0, Households).Select(m => scheme.CreateHouseholdSide(m, (ulong)m + 1))];
        _plain = ClearScheme.Plain().CreateHouseholdSide(0, 1);
        _actor = [.. Enumerable.Range(0, Length).Select(_ => (float)random.NextDouble(-10, 10))];
        _critic = [.. Enumerable.Range(0, Length).Select(_ => (float)random.NextDouble(-10, 10))];
        _otherActor = new float[Length];
        _otherCritic = new float[Length];
        _messages = [.. Enumerable.Range(0, Households).Select(m =>
        {
            var p = new FedGrid.Federation.Wire.PartialSums { Round = 0, Step = 0 };
            _sides[m].EncodePartialSums(_actor, _critic, p);
            return p;
        })];
        _own = new FedGrid.Federation.Wire.PartialSums { Round = 0, Step = 1 };
        _plainMessage = new FedGrid.Federation.Wire.PartialSums { Round = 0, Step = 1 };
        _reply = new FedGrid.Federation.Wire.SumsReply();
        CoordinatorStep();
        HouseholdMask();
        PlainEncode();
        Console.Error.WriteLine(FormattableString.Invariant(
            $"masked-sums bench: partial-sums message {_own.CalculateSize()} B masked, {_plainMessage.CalculateSize()} B plain; totals reply {_reply.CalculateSize()} B"));
    }

    /// <summary>Reference: a household's partial sums under <c>plain</c> (floats into the message).</summary>
    [Benchmark(Baseline = true)]
    public void PlainEncode() => _plain.EncodePartialSums(_actor, _critic, _plainMessage);

    /// <summary>One household masks its step: actor and critic sums, 31 pair masks each, into the message.</summary>
    [Benchmark]
    public void HouseholdMask()
    {
        _own.Step = ++_step;
        _sides[0].EncodePartialSums(_actor, _critic, _own);
    }

    /// <summary>One household takes its own part out of the returned totals (both networks).</summary>
    [Benchmark]
    public void HouseholdUnmask() => _sides[0].DecodeSums(_reply, _actor, _critic, _otherActor, _otherCritic);

    /// <summary>The coordinator's combining of one step (32 households), per household.</summary>
    [Benchmark(OperationsPerInvoke = Households)]
    public void CoordinatorStep()
    {
        _combiner.Begin();
        for (int m = 0; m < Households; m++)
        {
            _combiner.Add(m, _messages[m]);
        }
        for (int m = 0; m < Households; m++)
        {
            _combiner.WriteReply(m, _reply);
        }
    }
}
