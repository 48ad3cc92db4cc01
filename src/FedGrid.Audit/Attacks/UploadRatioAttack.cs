namespace FedGrid.Audit.Attacks;

/// <summary>
/// Uploads: analytic recovery of first-layer inputs from weight and bias updates (Phong et al. 2018). For a dense
/// first layer with bias trained by gradient steps, row o of the update is ΔW_o = Σ_s g_{o,s} x_s and Δb_o = Σ_s g_{o,s},
/// so with one local sample x = ΔW_o / Δb_o exactly, for every row with Δb_o ≠ 0. With several samples each row's ratio
/// is a mixture of them; the least-squares fit over all rows (and all uploaded networks),
/// x̂ = Σ_o Δb_o ΔW_o / Σ_o Δb_o², is the attack's estimate for every slot of the round, and the rows' spread
/// around it is its error estimate.
/// <para>
/// Uploads are float32, so with small steps the deltas keep few digits and the least-squares error falls only like
/// 1/√rows. When the uploads carry their rounding intervals (<see cref="FirstLayerUpdate.WeightRounding"/>), the attack
/// also computes the set-membership estimate of the one-sample model: every row o confines its change to boxes,
/// Δb_o ∈ B_o and Δb_o·x_j ∈ W_oj, so x_j ∈ W_oj / B_o; intersecting over all rows of all networks (and narrowing each
/// B_o back by W_oj / X_j, with the public features' known values, until nothing moves) leaves an interval X_j that holds
/// the true input whenever the upload is one sample's gradient step — a common factor of the row (the clipping scale, the
/// learning rate) cancels — and whose width falls like 1/rows. Its midpoint is the estimate; an empty intersection (the
/// upload is not one sample's step: several samples, an adaptive optimiser, noise) falls back to the least squares.
/// </para>
/// </summary>
public static class UploadRatioAttack
{
    /// <summary>Attack name in results.</summary>
    public const string Name = "weightBiasRatio";

    /// <summary>A round whose fit energy per feature is below this multiple of the spread per degree of freedom is rejected.</summary>
    public const double ModelCheckRatio = 10;

    /// <summary>Estimates further than this many prior spreads from the prior mean are rejected as implausible.</summary>
    public const double PlausibleSpread = 5;

    /// <summary>
    /// Relative slack added to each rounding interval for the household's own float32 arithmetic in forming the step
    /// (input × back-propagated error, × clipping scale, × learning rate: a few roundings of 2^-24 each).
    /// </summary>
    public const double StepArithmeticSlack = 1.0 / (1 << 21);

    /// <summary>Sweeps of the interval narrowing at most (it usually settles in two or three).</summary>
    public const int MaxSweeps = 20;

    /// <summary>One round's fit of the ratio model to its first-layer updates.</summary>
    /// <param name="Rows">Rows with a usable bias change (|Δb_o| above 1e-7 of the largest).</param>
    /// <param name="BiasEnergy">Σ_o Δb_o² over those rows.</param>
    /// <param name="LeastSquares">x̂ = Σ_o Δb_o ΔW_o / Σ_o Δb_o², per feature.</param>
    /// <param name="Spread">Σ_o (ΔW_oj − Δb_o x̂_j)², per feature.</param>
    /// <param name="SignLike">Whether |ΔW_oj| = |Δb_o| nearly everywhere (an adaptive optimiser's first step).</param>
    /// <param name="Lower">Set-membership interval of each feature, lower ends (−∞ where no row bounds it), or null when the uploads carry no rounding intervals or the intersection is empty.</param>
    /// <param name="Upper">Upper ends, as <paramref name="Lower"/>.</param>
    public sealed record RatioFit(int Rows, double BiasEnergy, double[] LeastSquares, double[] Spread, bool SignLike, double[]? Lower, double[]? Upper)
    {
        /// <summary>Whether feature j has a finite set-membership interval.</summary>
        /// <param name="j">Feature index.</param>
        /// <returns>True when bounded.</returns>
        public bool IntervalBounds(int j) => Lower is not null && double.IsFinite(Lower[j]) && double.IsFinite(Upper![j]);

        /// <summary>The attack's estimate of feature j: the interval's midpoint when bounded, else the least squares.</summary>
        /// <param name="j">Feature index.</param>
        /// <returns>x̂_j.</returns>
        public double Estimate(int j) => IntervalBounds(j) ? 0.5 * (Lower![j] + Upper![j]) : LeastSquares[j];
    }

    /// <summary>Fits the ratio model to one round's first-layer updates.</summary>
    /// <param name="updates">The round's updates (one per uploaded network), all with <paramref name="n"/> features.</param>
    /// <param name="n">Features per block.</param>
    /// <param name="known">Values of features the attacker knows for the trained sample (NaN where unknown), or empty for none.</param>
    /// <returns>The fit; <see cref="RatioFit.BiasEnergy"/> is 0 when no row has a bias change.</returns>
    public static RatioFit Fit(IReadOnlyList<FirstLayerUpdate> updates, int n, ReadOnlySpan<double> known)
    {
        ArgumentNullException.ThrowIfNull(updates);
        var x = new double[n];
        var spread = new double[n];
        double bb = 0, scale = 0;
        int rows = 0;
        foreach (FirstLayerUpdate u in updates)
            for (int o = 0; o < u.Neurons; o++) scale = Math.Max(scale, Math.Abs(u.BiasDelta[o]));
        foreach (FirstLayerUpdate u in updates)
            for (int o = 0; o < u.Neurons; o++)
            {
                double db = u.BiasDelta[o];
                if (!(Math.Abs(db) > 1e-7 * scale)) continue;
                rows++;
                bb += db * db;
                for (int j = 0; j < n; j++) x[j] += db * u.WeightDelta[o * n + j];
            }
        if (!(bb > 0)) return new RatioFit(0, 0, x, spread, false, null, null);
        for (int j = 0; j < n; j++) x[j] /= bb;
        // A sign-like update (|ΔW_oj| = |Δb_o| nearly everywhere) is the first step of an adaptive optimiser such as Adam
        // (Δ = −η g/(|g| + ε)): the ratio then carries only signs, not magnitudes.
        int nonzero = 0, signLike = 0;
        foreach (FirstLayerUpdate u in updates)
            for (int o = 0; o < u.Neurons; o++)
            {
                double db = u.BiasDelta[o];
                if (!(Math.Abs(db) > 1e-7 * scale)) continue;
                for (int j = 0; j < n; j++)
                {
                    double dw = u.WeightDelta[o * n + j], r = dw - db * x[j];
                    spread[j] += r * r;
                    if (dw == 0) continue;
                    nonzero++;
                    if (Math.Abs(Math.Abs(dw) - Math.Abs(db)) <= 1e-2 * Math.Abs(db)) signLike++;
                }
            }
        (double[]? lo, double[]? hi) = Intervals(updates, n, known);
        return new RatioFit(rows, bb, x, spread, nonzero > 0 && signLike > 0.8 * nonzero, lo, hi);
    }

    /// <summary>
    /// The set-membership estimate of the one-sample model ΔW_o = Δb_o xᵀ: boxes B_o ∋ Δb_o and W_oj ∋ ΔW_oj from the rounding
    /// intervals, X_j from the known features; alternately X_j ∩= W_oj / B_o over rows whose B_o excludes 0 and B_o ∩= W_oj / X_j
    /// over features whose X_j is bounded and excludes 0, until the widths stop shrinking. Null when any update lacks rounding
    /// intervals or a box becomes empty.
    /// </summary>
    private static (double[]? Lower, double[]? Upper) Intervals(IReadOnlyList<FirstLayerUpdate> updates, int n, ReadOnlySpan<double> known)
    {
        int rows = 0;
        foreach (FirstLayerUpdate u in updates)
        {
            if (u.WeightRounding is null || u.BiasRounding is null) return (null, null);
            rows += u.Neurons;
        }
        var xl = new double[n];
        var xh = new double[n];
        for (int j = 0; j < n; j++)
        {
            bool k = j < known.Length && double.IsFinite(known[j]);
            // A known feature as the household holds it: float32, within a relative 1e-6 of the attacker's value.
            double slack = k ? 1e-6 * Math.Abs(known[j]) + 1e-9 : 0;
            xl[j] = k ? known[j] - slack : double.NegativeInfinity;
            xh[j] = k ? known[j] + slack : double.PositiveInfinity;
        }
        var bl = new double[rows];
        var bh = new double[rows];
        int row = 0;
        foreach (FirstLayerUpdate u in updates)
            for (int o = 0; o < u.Neurons; o++, row++)
            {
                double db = u.BiasDelta[o], h = u.BiasRounding![o] + StepArithmeticSlack * Math.Abs(db);
                bl[row] = db - h;
                bh[row] = db + h;
            }
        double before = double.PositiveInfinity;
        for (int sweep = 0; sweep < MaxSweeps; sweep++)
        {
            for (int pass = 0; pass < 2; pass++)
            {
                row = 0;
                foreach (FirstLayerUpdate u in updates)
                    for (int o = 0; o < u.Neurons; o++, row++)
                    {
                        if (pass == 0 && !(bl[row] > 0 || bh[row] < 0)) continue;
                        for (int j = 0; j < n; j++)
                        {
                            double dw = u.WeightDelta[o * n + j], h = u.WeightRounding![o * n + j] + StepArithmeticSlack * Math.Abs(dw);
                            if (pass == 0) Narrow(ref xl[j], ref xh[j], dw - h, dw + h, bl[row], bh[row]);
                            else if (double.IsFinite(xl[j]) && double.IsFinite(xh[j]) && (xl[j] > 0 || xh[j] < 0)) Narrow(ref bl[row], ref bh[row], dw - h, dw + h, xl[j], xh[j]);
                        }
                    }
                for (int j = 0; j < n; j++) if (!(xl[j] <= xh[j])) return (null, null);
                for (int r = 0; r < rows; r++) if (!(bl[r] <= bh[r])) return (null, null);
            }
            // Settled when the summed relative width of the bounded features shrinks by less than 0.1 %.
            double width = 0;
            for (int j = 0; j < n; j++)
                if (double.IsFinite(xl[j]) && double.IsFinite(xh[j])) width += (xh[j] - xl[j]) / (Math.Abs(xl[j] + xh[j]) + 1e-12);
            if (!(width < 0.999 * before)) break;
            before = width;
        }
        return (xl, xh);
    }

    /// <summary>[lo, hi] ∩= [al, ah] / [bl, bh] for a divisor box that excludes zero.</summary>
    private static void Narrow(ref double lo, ref double hi, double al, double ah, double bl, double bh)
    {
        double q1 = al / bl, q2 = al / bh, q3 = ah / bl, q4 = ah / bh;
        lo = Math.Max(lo, Math.Min(Math.Min(q1, q2), Math.Min(q3, q4)));
        hi = Math.Min(hi, Math.Max(Math.Max(q1, q2), Math.Max(q3, q4)));
    }

    /// <summary>Runs the attack on every household with first-layer uploads.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="reconstructions">Receives the reconstructions.</param>
    /// <param name="identifiability">Receives one entry per attacked household.</param>
    /// <param name="notes">Receives what could not be done.</param>
    public static void Run(AttackerView view, AttackOptions options, List<Reconstruction> reconstructions, List<Identifiability> identifiability, List<string> notes)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(options);
        int n = view.FeatureCount, T = view.SlotCount;
        int attacked = 0, masked = 0;
        var known = new double[n];
        for (int m = 0; m < view.Households.Count; m++)
        {
            HouseholdView h = view.Households[m];
            bool hasUpdates = h.Rounds.Any(r => r.Updates.Count > 0);
            // Masked uploads: like masked partial sums, the channel yields nothing of this household; the attacker keeps its prior.
            int maskedRounds = hasUpdates ? 0 : h.Rounds.Count(r => r.MaskedUpload);
            if (!hasUpdates && maskedRounds == 0) continue;
            if (hasUpdates) attacked++;
            else masked++;
            var est = new Dictionary<Quantity, (double[] E, double[] V)>();
            foreach (Quantity q in AuditNames.Quantities)
                if (view.FeatureIndex(q) >= 0) est[q] = AttackPrior.Fallback(view, options, m, q);
            int usedRounds = 0, minRows = int.MaxValue, rejected = 0, signRounds = 0, implausible = 0, intervalRounds = 0;
            foreach (RoundObservation round in h.Rounds)
            {
                if (round.Updates.Count == 0) continue;
                int first = round.TrainingStartSlot >= 0 ? round.TrainingStartSlot : round.StartSlot;
                int len = round.TrainingStartSlot >= 0 && round.LocalSamples > 0 ? round.LocalSamples : round.SlotCount;
                // The public features of the one trained sample are known to the coordinator.
                Array.Fill(known, double.NaN);
                if (len == 1 && view.PublicFeatureValues is { } pv && first >= 0 && first < T)
                    for (int j = 0; j < n; j++)
                        if (view.Features[j].IsPublic) known[j] = pv[first * n + j];
                RatioFit fit = Fit(round.Updates, n, known);
                if (!(fit.BiasEnergy > 0)) continue;
                if (fit.SignLike) { signRounds++; continue; }
                int rows = fit.Rows;
                // Model check (an F ratio): energy of the fit per feature against the rows' spread per degree of freedom. Updates that are
                // not of the form Δb_o·x (noise) give a ratio near 1; the attacker then keeps its prior for the round.
                double fitEnergy = 0, residual = 0;
                for (int j = 0; j < n; j++) { fitEnergy += fit.LeastSquares[j] * fit.LeastSquares[j] * fit.BiasEnergy; residual += fit.Spread[j]; }
                int dof = (rows - 1) * n;
                if (dof > 0 && fitEnergy / n < ModelCheckRatio * residual / dof) { rejected++; continue; }
                usedRounds++;
                minRows = Math.Min(minRows, rows);
                if (fit.Lower is not null) intervalRounds++;
                for (int j = 0; j < n; j++)
                {
                    InputFeature f = view.Features[j];
                    if (f.Quantity is not { } q || !est.TryGetValue(q, out var e)) continue;
                    double kw = f.OffsetKw + f.KwPerUnit * fit.Estimate(j);
                    // Interval: uniform over it; least squares: the spread of the row ratios around the fit (weighted by Δb²), in kW²,
                    // plus float32 rounding of the ratio.
                    double v = fit.IntervalBounds(j)
                        ? Math.Pow(0.5 * (fit.Upper![j] - fit.Lower![j]) * f.KwPerUnit, 2) / 3
                        : fit.Spread[j] / fit.BiasEnergy * f.KwPerUnit * f.KwPerUnit / Math.Max(1, rows - 1) + Math.Pow(1e-6 * kw, 2);
                    v = Math.Max(v, AttackPrior.TinyVariance);
                    // Posterior mean with the attacker's prior: an inconsistent upload (large spread) leans on the prior.
                    double sp = AttackPrior.Std(view, options, m, q);
                    double[] prior = AttackPrior.Mean(view, options, m, q);
                    // Plausibility (several samples only, whose weighted mean must lie near the round's prior mean): an estimate more than
                    // PlausibleSpread prior spreads from it, or negative, means the update is not a gradient step on the features (several
                    // adaptive-optimiser steps mix them); keep the prior. A single sample may be a spike and is not checked.
                    double pm = 0;
                    for (int t = round.StartSlot; t < Math.Min(T, round.StartSlot + round.SlotCount); t++) pm += prior[t];
                    pm /= Math.Max(1, Math.Min(T, round.StartSlot + round.SlotCount) - round.StartSlot);
                    if (options.UsePriors && round.LocalSamples != 1 && (kw < -sp || Math.Abs(kw - pm) > PlausibleSpread * sp)) { implausible++; continue; }
                    for (int t = Math.Max(0, first); t < Math.Min(T, first + len); t++)
                    {
                        double wp = 1 / (sp * sp), wa = 1 / v;
                        e.E[t] = (wa * kw + wp * prior[t]) / (wa + wp);
                        e.V[t] = 1 / (wa + wp);
                    }
                }
            }
            foreach (var (q, e) in est) reconstructions.Add(new Reconstruction(Channel.Uploads, Name, q, m, e.E, e.V));
            identifiability.Add(new Identifiability(m, Channel.Uploads, Name, usedRounds > 0 ? 1 : 0, n, double.NaN, double.NaN,
                !hasUpdates ? $"not observable: {maskedRounds} round(s) of masked uploads (ring words whose masks cancel only in the round's sum); no individual update to invert, the prior is kept" :
                usedRounds == 0 ? "no round had a usable first-layer update (zero bias change, noise-like or sign-like updates)" + (rejected > 0 ? $"; {rejected} round(s) rejected as noise" : "") + (signRounds > 0 ? $"; {signRounds} round(s) sign-like (adaptive optimiser)" : "") :
                $"{usedRounds} round(s) with first-layer updates, at least {minRows} informative row(s) each; exact for one local sample, a weighted mean of the round's samples otherwise"
                + (intervalRounds > 0 ? $"; {intervalRounds} round(s) consistent with one sample's step within float32 rounding use the set-membership (interval) estimate" : "")
                + (rejected > 0 ? $"; {rejected} round(s) whose updates are not of the form Δb·x (noise) keep the prior" : "")
                + (signRounds > 0 ? $"; {signRounds} round(s) with sign-like updates (an adaptive optimiser's first step) keep the prior" : "")
                + (implausible > 0 ? $"; {implausible} round-feature estimate(s) implausible against the prior (not a plain gradient step) keep the prior" : "")));
        }
        if (masked > 0)
            notes.Add($"uploads: not observable for {masked} household(s) with masked uploads — the coordinator holds only each round's sum over the participants, so the weight/bias ratio attack keeps the prior there");
        if (attacked == 0 && masked == 0)
            notes.Add("uploads: no household uploaded its first-layer block (e.g. private columns), so the weight/bias ratio attack had nothing to work on");
    }
}
