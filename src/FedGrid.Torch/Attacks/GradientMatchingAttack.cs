using FedGrid.Audit;
using FedGrid.Audit.Attacks;
using TorchSharp;
using static TorchSharp.torch;

namespace FedGrid.Torch.Attacks;

/// <summary>Settings of <see cref="GradientMatchingAttack"/>.</summary>
public sealed record GradientMatchingOptions
{
    /// <summary>Adam iterations per round.</summary>
    public int Iterations { get; init; } = 1500;

    /// <summary>Adam step size (decays linearly to a tenth over the iterations).</summary>
    public double LearningRate { get; init; } = 0.05;

    /// <summary>Weight of the total-variation prior Σ_s |x̂_{s+1} − x̂_s| over consecutive samples (0: off).</summary>
    public double TotalVariationWeight { get; init; }

    /// <summary>Rounds trained on more local samples than this are not attacked (the problem grows with the sample count).</summary>
    public int MaxSamples { get; init; } = 96;

    /// <summary>A fit whose relative residual (sine of the angle between model and observed update) exceeds this is not trusted.</summary>
    public double TrustedResidual { get; init; } = 1e-3;

    /// <summary>Seed of the starting inputs (drawn from the prior).</summary>
    public long Seed { get; init; } = 1;
}

/// <summary>
/// Uploads: gradient matching by optimisation (Geiping et al. 2020, "Inverting Gradients"). The attacker optimises dummy
/// inputs x̂_s so that the update they would produce matches the uploaded one in cosine similarity,
/// 1 − cos(ΔŴ, ΔW) with an optional total-variation prior (here over consecutive time slots), using TorchSharp autograd
/// and Adam. The coordinator holds only the household's first-layer block update ΔW_m and the bias update Δb, not the
/// layers above nor their local error signals, so the per-sample back-propagated signal ĝ_s (one per uploaded network)
/// is unknown too: the modelled update is ΔŴ = Σ_s ĝ_s x̂_sᵀ, Δb̂ = Σ_s ĝ_s. For given x̂ the best ĝ is a linear least-squares
/// solution, so it is eliminated in closed form inside the autograd graph (variable projection) and Adam moves only x̂.
/// Public features (price, time of day) are fixed at their known values; the rest start from the prior mean.
/// </summary>
/// <remarks>
/// With one local sample the match is exact and identifies x (the bias fixes the scale). With k samples the
/// observation has (n+1)·H·U numbers against k·(n_private + H·U) unknowns and a permutation of the samples; when the
/// unknowns outnumber the equations, or the fit is poor, the attack keeps the prior for that round (a match does not
/// identify the samples) and says so in its identifiability note.
/// </remarks>
public sealed class GradientMatchingAttack : IViewAttack
{
    /// <summary>Attack name in results.</summary>
    public const string AttackName = "gradientMatching";

    private readonly GradientMatchingOptions _options;
    private readonly TextWriter? _progress;

    /// <summary>Creates the attack.</summary>
    /// <param name="options">Settings; null for the defaults.</param>
    /// <param name="progress">Receives one line per household attacked (elapsed time), or null.</param>
    public GradientMatchingAttack(GradientMatchingOptions? options = null, TextWriter? progress = null)
    {
        _options = options ?? new GradientMatchingOptions();
        if (_options.Iterations < 1) throw new ArgumentOutOfRangeException(nameof(options), "at least one iteration");
        if (!(_options.TotalVariationWeight >= 0)) throw new ArgumentOutOfRangeException(nameof(options), "total-variation weight must be ≥ 0");
        _progress = progress;
    }

    /// <inheritdoc />
    public string Name => AttackName;

    /// <summary>Rounds attacked so far (all households), for progress and benchmarks.</summary>
    public int RoundsAttacked { get; private set; }

    /// <inheritdoc />
    public void Run(AttackerView view, AttackOptions options, List<Reconstruction> reconstructions, List<Identifiability> identifiability, List<string> notes)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(options);
        ArgumentNullException.ThrowIfNull(reconstructions);
        ArgumentNullException.ThrowIfNull(identifiability);
        ArgumentNullException.ThrowIfNull(notes);
        int attacked = 0;
        var watch = System.Diagnostics.Stopwatch.StartNew();

        int withUploads = view.Households.Count(h => h.Rounds.Any(r => r.Updates.Count > 0));
        for (int m = 0; m < view.Households.Count; m++)
        {
            HouseholdView h = view.Households[m];
            if (!h.Rounds.Any(r => r.Updates.Count > 0)) continue;
            attacked++;
            AttackHousehold(view, options, m, reconstructions, identifiability);
            _progress?.WriteLine(FormattableString.Invariant($"audit: gradient matching {attacked}/{withUploads} households ({watch.Elapsed.TotalSeconds:0.0} s)"));
        }
        if (attacked == 0)
            notes.Add("uploads: no household uploaded its first-layer block, so gradient matching had nothing to work on");
    }

    private void AttackHousehold(AttackerView view, AttackOptions options, int m, List<Reconstruction> reconstructions, List<Identifiability> identifiability)
    {
        int n = view.FeatureCount, T = view.SlotCount;
        HouseholdView h = view.Households[m];
        var est = new Dictionary<Quantity, (double[] E, double[] V)>();
        foreach (Quantity q in AuditNames.Quantities)
            if (view.FeatureIndex(q) >= 0) est[q] = AttackPrior.Fallback(view, options, m, q);
        int trusted = 0, untrustedFit = 0, underdetermined = 0, skipped = 0;
        double worstResidual = 0, bestUnderdetermined = double.PositiveInfinity, bestUntrusted = double.PositiveInfinity;
        foreach (RoundObservation round in h.Rounds)
        {
            if (round.Updates.Count == 0) continue;
            int first = round.TrainingStartSlot >= 0 ? round.TrainingStartSlot : round.StartSlot;
            int k = round.LocalSamples > 0 ? round.LocalSamples : round.SlotCount;
            first = Math.Max(0, first);
            k = Math.Min(k, T - first);
            if (k <= 0 || k > _options.MaxSamples) { skipped++; continue; }
            (double[] x, double residual) = Match(view, options, m, round, first, k);
            RoundsAttacked++;
            int privateFeatures = view.Features.Count(f => !f.IsPublic);
            int hu = round.Updates.Sum(u => u.Neurons);
            bool determined = k * (privateFeatures + hu) <= (n + 1) * hu;
            bool fits = residual <= _options.TrustedResidual;
            if (!determined) { underdetermined++; bestUnderdetermined = Math.Min(bestUnderdetermined, residual); continue; }
            if (!fits) { untrustedFit++; bestUntrusted = Math.Min(bestUntrusted, residual); continue; }
            trusted++;
            worstResidual = Math.Max(worstResidual, residual);
            foreach (var (q, e) in est)
            {
                int j = view.FeatureIndex(q);
                InputFeature f = view.Features[j];
                for (int s = 0; s < k; s++)
                {
                    int t = first + s;
                    e.E[t] = f.OffsetKw + f.KwPerUnit * x[s * n + j];
                    // Error estimate from the fit alone: the residual angle times the size of the value (at least float32 rounding).
                    double err = Math.Abs(f.KwPerUnit) * (Math.Abs(x[s * n + j]) + 1e-3) * Math.Max(residual, 1e-7);
                    e.V[t] = Math.Max(err * err, AttackPrior.TinyVariance);
                }
            }
        }
        foreach (var (q, e) in est) reconstructions.Add(new Reconstruction(Channel.Uploads, AttackName, q, m, e.E, e.V));
        string note = trusted + untrustedFit + underdetermined == 0
            ? "no round was attacked" + (skipped > 0 ? $" ({skipped} round(s) with more than {_options.MaxSamples} local samples skipped)" : "")
            : $"{trusted} round(s) matched and identified" + (trusted > 0 ? $" (largest relative residual {worstResidual:G2})" : "")
              + (underdetermined > 0 ? $"; {underdetermined} round(s) with more unknowns (samples × (private features + first-layer rows)) than uploaded numbers keep the prior: a match (best relative residual {bestUnderdetermined:G2}) does not identify the samples" : "")
              + (untrustedFit > 0 ? $"; {untrustedFit} round(s) whose best match stayed above relative residual {_options.TrustedResidual:G2} (best {bestUntrusted:G2}; update not of the modelled form, e.g. noise or an adaptive optimiser, or a local minimum) keep the prior" : "")
              + (skipped > 0 ? $"; {skipped} round(s) skipped (more than {_options.MaxSamples} samples)" : "");
        identifiability.Add(new Identifiability(m, Channel.Uploads, AttackName, trusted > 0 ? 1 : 0, n, double.NaN, double.NaN, note));
    }

    /// <summary>
    /// Matches one round's uploads: returns the dummy inputs x̂ (k × n row-major, feature units) and the relative residual
    /// of the best-scaled match, √(1 − cos²).
    /// </summary>
    private (double[] X, double Residual) Match(AttackerView view, AttackOptions options, int m, RoundObservation round, int first, int k)
    {
        int n = view.FeatureCount;
        using var scope = NewDisposeScope();
        // Initial inputs and the mask of free entries.
        var init = new double[k * n];
        var free = new double[k * n];
        var spread = new double[k * n];
        for (int s = 0; s < k; s++)
            for (int j = 0; j < n; j++)
            {
                InputFeature f = view.Features[j];
                int t = first + s;
                if (f.IsPublic && view.PublicFeatureValues is { } pub && !double.IsNaN(pub[t * n + j])) { init[s * n + j] = pub[t * n + j]; continue; }
                free[s * n + j] = 1;
                spread[s * n + j] = 0.01;
                if (f.Quantity is { } q && f.KwPerUnit != 0)
                {
                    init[s * n + j] = (AttackPrior.Mean(view, options, m, q)[t] - f.OffsetKw) / f.KwPerUnit;
                    spread[s * n + j] = AttackPrior.Std(view, options, m, q) / Math.Abs(f.KwPerUnit);
                }
            }
        Tensor mask = tensor(free, [k, n], ScalarType.Float64);
        Tensor fixedPart = tensor(init, [k, n], ScalarType.Float64) * (1 - mask);
        // Start at a seeded draw from the prior (mean ± spread), which tells samples of equal prior mean apart.
        var gen = new Generator((ulong)(_options.Seed + 7919L * m + round.StartSlot));
        Tensor start = (tensor(init, [k, n], ScalarType.Float64) + tensor(spread, [k, n], ScalarType.Float64) * randn([k, n], ScalarType.Float64, generator: gen)) * mask;
        var xFree = new TorchSharp.Modules.Parameter(start);
        // Observed [ΔW_u | Δb_u] of every uploaded network, stacked: (Σ_u H_u) × (n + 1).
        var observed = new List<Tensor>();
        foreach (FirstLayerUpdate u in round.Updates)
            observed.Add(cat([tensor(u.WeightDelta, [u.Neurons, n], ScalarType.Float64), tensor(u.BiasDelta, [u.Neurons, 1], ScalarType.Float64)], 1));
        Tensor target = cat(observed.ToArray(), 0);
        double targetNorm = target.norm().item<double>();
        if (!(targetNorm > 0)) return (init, 1);
        target = target / targetNorm;
        var adam = optim.Adam([xFree], _options.LearningRate);
        Tensor ones1 = ones([k, 1], ScalarType.Float64);
        Tensor eye = torch.eye(k, dtype: ScalarType.Float64);
        // The modelled update for inputs x̂ with the best per-sample signals Ĝ: with A = [x̂ | 1] (k × (n+1)) the update is
        // Ĝᵀ A, and the least-squares Ĝᵀ = Y Aᵀ (A Aᵀ)⁻¹ (variable projection; a tiny ridge keeps equal samples solvable).
        Tensor Model(Tensor xHat)
        {
            Tensor a = cat([xHat, ones1], 1);
            Tensor gram = a.matmul(a.t());
            Tensor ridge = eye * (1e-12 * gram.trace() / k + 1e-300);
            Tensor gT = linalg.solve(gram + ridge, a.matmul(target.t())).t();
            return gT.matmul(a);
        }
        for (int it = 0; it < _options.Iterations; it++)
        {
            using var step = NewDisposeScope();
            double lr = _options.LearningRate * (1 - 0.9 * it / Math.Max(1, _options.Iterations - 1));
            foreach (var group in adam.ParamGroups) group.LearningRate = lr;
            adam.zero_grad();
            Tensor xHat = fixedPart + xFree * mask;
            Tensor model = Model(xHat);
            Tensor loss = 1 - (model * target).sum() / (model.norm() + 1e-300);
            if (_options.TotalVariationWeight > 0 && k > 1)
                loss = loss + _options.TotalVariationWeight * ((xHat[1..] - xHat[..^1]) * mask[1..]).abs().sum() / k;
            loss.backward();
            adam.step();
        }
        using (no_grad())
        {
            Tensor xHat = fixedPart + xFree * mask;
            Tensor model = Model(xHat);
            double cos = ((model * target).sum() / model.norm()).item<double>();
            double residual = Math.Sqrt(Math.Max(0, 1 - cos * cos));
            return (xHat.contiguous().data<double>().ToArray(), double.IsFinite(residual) ? residual : 1);
        }
    }
}
