namespace FedGrid.Audit.Attacks;

/// <summary>
/// Uploads: analytic recovery of first-layer inputs from weight and bias updates (Phong et al. 2018). For a dense
/// first layer with bias trained by gradient steps, row o of the update is ΔW_o = Σ_s g_{o,s} x_s and Δb_o = Σ_s g_{o,s},
/// so with one local sample x = ΔW_o / Δb_o exactly, for every row with Δb_o ≠ 0. With several samples each row's ratio
/// is a mixture of them; the least-squares fit over all rows (and all uploaded networks),
/// x̂ = Σ_o Δb_o ΔW_o / Σ_o Δb_o², is the attack's estimate for every slot of the round, and the rows' spread
/// around it is its error estimate.
/// </summary>
public static class UploadRatioAttack
{
    /// <summary>Attack name in results.</summary>
    public const string Name = "weightBiasRatio";

    /// <summary>A round whose fit energy per feature is below this multiple of the spread per degree of freedom is rejected.</summary>
    public const double ModelCheckRatio = 10;

    /// <summary>Estimates further than this many prior spreads from the prior mean are rejected as implausible.</summary>
    public const double PlausibleSpread = 5;

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
        for (int m = 0; m < view.Households.Count; m++)
        {
            HouseholdView h = view.Households[m];
            if (!h.Rounds.Any(r => r.Updates.Count > 0))
            {
                if (h.Rounds.Any(r => r.MaskedUpload))
                {
                    // Masked uploads: like masked partial sums, the channel yields nothing of this household; the attacker keeps its prior.
                    masked++;
                    foreach (Quantity q in AuditNames.Quantities)
                    {
                        if (view.FeatureIndex(q) < 0) continue;
                        var (pe, pv) = AttackPrior.Fallback(view, options, m, q);
                        reconstructions.Add(new Reconstruction(Channel.Uploads, Name, q, m, pe, pv));
                    }
                    identifiability.Add(new Identifiability(m, Channel.Uploads, Name, 0, n, double.NaN, double.NaN,
                        $"not observable: {h.Rounds.Count(r => r.MaskedUpload)} round(s) of masked uploads (ring words whose masks cancel only in the round's sum); no individual update to invert, the prior is kept"));
                }
                continue;
            }
            attacked++;
            var est = new Dictionary<Quantity, (double[] E, double[] V)>();
            foreach (Quantity q in AuditNames.Quantities)
                if (view.FeatureIndex(q) >= 0) est[q] = AttackPrior.Fallback(view, options, m, q);
            var x = new double[n];
            var spread = new double[n];
            int usedRounds = 0, minRows = int.MaxValue, rejected = 0, signRounds = 0, implausible = 0;
            foreach (RoundObservation round in h.Rounds)
            {
                Array.Clear(x);
                Array.Clear(spread);
                double bb = 0, scale = 0;
                int rows = 0;
                foreach (FirstLayerUpdate u in round.Updates)
                    for (int o = 0; o < u.Neurons; o++)
                    {
                        double db = u.BiasDelta[o];
                        scale = Math.Max(scale, Math.Abs(db));
                    }
                foreach (FirstLayerUpdate u in round.Updates)
                    for (int o = 0; o < u.Neurons; o++)
                    {
                        double db = u.BiasDelta[o];
                        if (!(Math.Abs(db) > 1e-7 * scale)) continue;
                        rows++;
                        bb += db * db;
                        for (int j = 0; j < n; j++) x[j] += db * u.WeightDelta[o * n + j];
                    }
                if (!(bb > 0)) continue;
                // A sign-like update (|ΔW_oj| = |Δb_o| nearly everywhere) is the first step of an adaptive optimiser such as Adam
                // (Δ = −η g/(|g| + ε)): the ratio then carries only signs, not magnitudes, and is not used.
                int nonzero = 0, signLike = 0;
                foreach (FirstLayerUpdate u in round.Updates)
                    for (int o = 0; o < u.Neurons; o++)
                    {
                        double db = Math.Abs(u.BiasDelta[o]);
                        if (!(db > 1e-7 * scale)) continue;
                        for (int j = 0; j < n; j++)
                        {
                            double dw = Math.Abs(u.WeightDelta[o * n + j]);
                            if (dw == 0) continue;
                            nonzero++;
                            if (Math.Abs(dw - db) <= 1e-2 * db) signLike++;
                        }
                    }
                if (nonzero > 0 && signLike > 0.8 * nonzero) { signRounds++; continue; }
                usedRounds++;
                minRows = Math.Min(minRows, rows);
                for (int j = 0; j < n; j++) x[j] /= bb;
                foreach (FirstLayerUpdate u in round.Updates)
                    for (int o = 0; o < u.Neurons; o++)
                    {
                        double db = u.BiasDelta[o];
                        if (!(Math.Abs(db) > 1e-7 * scale)) continue;
                        for (int j = 0; j < n; j++)
                        {
                            double r = u.WeightDelta[o * n + j] - db * x[j];
                            spread[j] += r * r;
                        }
                    }
                // Model check (an F ratio): energy of the fit per feature against the rows' spread per degree of freedom. Updates that are
                // not of the form Δb_o·x (noise) give a ratio near 1; the attacker then keeps its prior for the round.
                double fitEnergy = 0, residual = 0;
                for (int j = 0; j < n; j++) { fitEnergy += x[j] * x[j] * bb; residual += spread[j]; }
                int dof = (rows - 1) * n;
                if (dof > 0 && fitEnergy / n < ModelCheckRatio * residual / dof) { usedRounds--; rejected++; continue; }
                for (int j = 0; j < n; j++)
                {
                    InputFeature f = view.Features[j];
                    if (f.Quantity is not { } q || !est.TryGetValue(q, out var e)) continue;
                    double kw = f.OffsetKw + f.KwPerUnit * x[j];
                    // Spread of the row ratios around the fit (weighted by Δb²), in kW², plus float32 rounding of the ratio.
                    double v = spread[j] / bb * f.KwPerUnit * f.KwPerUnit / Math.Max(1, rows - 1) + Math.Pow(1e-6 * kw, 2);
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
                    int first = round.TrainingStartSlot >= 0 ? round.TrainingStartSlot : round.StartSlot;
                    int len = round.TrainingStartSlot >= 0 && round.LocalSamples > 0 ? round.LocalSamples : round.SlotCount;
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
                usedRounds == 0 ? "no round had a usable first-layer update (zero bias change, noise-like or sign-like updates)" + (rejected > 0 ? $"; {rejected} round(s) rejected as noise" : "") + (signRounds > 0 ? $"; {signRounds} round(s) sign-like (adaptive optimiser)" : "") :
                $"{usedRounds} round(s) with first-layer updates, at least {minRows} informative row(s) each; exact for one local sample, a weighted mean of the round's samples otherwise"
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
