using FedGrid.Audit.Numerics;

namespace FedGrid.Audit.Attacks;

/// <summary>
/// Partial sums when W_m never leaves the household (private columns). Within one round W_m is fixed, so the
/// round's observations A (slots × H₁) = X Wᵀ span the same column space as the household's feature matrix X
/// (slots × n): the SVD of A recovers X up to an unknown invertible n × n map. Every quantity is a vector in that
/// subspace; the attack picks it by calibration:
/// <list type="bullet">
/// <item><see cref="PriorProjectionName"/>: the orthogonal projection of the prior profile onto the subspace (never worse than the prior when the
/// subspace is exact, since the truth lies in it);</item>
/// <item><see cref="MeterCalibrationName"/>: base load only, a joint Bayesian regression of the substation meter minus the returned setpoints and known
/// loads on every household's subspace basis (prior on each household's coefficients, two free loss terms: a constant and one
/// proportional to the squared import).</item>
/// </list>
/// </summary>
public static class SubspaceAttack
{
    /// <summary>Attack name: prior projected onto the recovered subspace.</summary>
    public const string PriorProjectionName = "subspacePriorProjection";

    /// <summary>Attack name: subspace calibrated by regression of the substation meter.</summary>
    public const string MeterCalibrationName = "subspaceMeterCalibration";

    /// <summary>Singular values below this fraction of the largest count as float32 noise.</summary>
    public const double RankTolerance = 1e-5;

    /// <summary>A round is rejected when singular value n+1 exceeds this fraction of singular value n (no spectral gap).</summary>
    public const double GapRatio = 0.1;

    private sealed record Basis(int Start, int[] Slots, double[] B, int R);

    /// <summary>Runs both calibrations on every household whose broadcast weights are unknown.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="reconstructions">Receives the reconstructions.</param>
    /// <param name="identifiability">Receives one entry per attacked household.</param>
    /// <param name="notes">Receives what could not be done.</param>
    public static void Run(AttackerView view, AttackOptions options, List<Reconstruction> reconstructions, List<Identifiability> identifiability, List<string> notes)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(options);
        int n = view.FeatureCount, hN = view.FirstLayerSize, T = view.SlotCount;
        var targets = new List<int>();
        var bases = new Dictionary<int, List<Basis>>();
        for (int m = 0; m < view.Households.Count; m++)
        {
            HouseholdView h = view.Households[m];
            if (h.PartialSums is null || h.Rounds.Count == 0 || h.Rounds.All(r => r.BroadcastWeights is not null)) continue;
            targets.Add(m);
            var list = new List<Basis>();
            int minRank = n, rejected = 0;
            foreach (RoundObservation round in h.Rounds)
            {
                var slots = new List<int>();
                for (int t = round.StartSlot; t < Math.Min(T, round.StartSlot + round.SlotCount); t++)
                    if (float.IsFinite(h.PartialSums[t * hN])) slots.Add(t);
                if (slots.Count == 0) continue;
                var a = new double[slots.Count * hN];
                for (int i = 0; i < slots.Count; i++)
                    for (int o = 0; o < hN; o++) a[i * hN + o] = h.PartialSums[slots[i] * hN + o];
                // Sketch of n + 6 directions: the first n carry x_m, the rest show whether a spectral gap follows them.
                SvdResult svd = DenseLinearAlgebra.LeadingSvd(a, slots.Count, hN, n + 6, 17 + m);
                int r = Math.Min(n, svd.Rank(RankTolerance));
                // Spectral-gap test: observations of the form X Wᵀ have at most n significant singular values; when the
                // first one past the kept ones is not far below the last kept, the round does not fit the model (noise,
                // masking) and the attacker keeps its prior there.
                if (r == 0 || (svd.K > r && svd.S[r] > GapRatio * svd.S[r - 1])) { rejected++; continue; }
                minRank = Math.Min(minRank, r);
                var b = new double[slots.Count * r];
                for (int i = 0; i < slots.Count; i++)
                    for (int k = 0; k < r; k++) b[i * r + k] = svd.U[i * svd.K + k];
                list.Add(new Basis(round.StartSlot, [.. slots], b, r));
            }
            bases[m] = list;
            foreach (Quantity q in AuditNames.Quantities)
            {
                if (view.FeatureIndex(q) < 0) continue;
                (double[] est, double[] var) = AttackPrior.Fallback(view, options, m, q);
                double[] prior = AttackPrior.Mean(view, options, m, q);
                double sp = AttackPrior.Std(view, options, m, q);
                foreach (Basis basis in list) Project(basis, prior, sp, est, var);
                reconstructions.Add(new Reconstruction(Channel.PartialSums, PriorProjectionName, q, m, est, var));
            }
            if (list.Count == 0) minRank = 0;
            identifiability.Add(new Identifiability(m, Channel.PartialSums, PriorProjectionName, minRank, n, double.NaN, double.NaN,
                $"W_m unknown: each round's partial sums span a {minRank}-dimensional subspace holding x_m, known only up to an unknown {minRank}×{minRank} map; the quantities are picked out by calibration (priors, substation meter)"
                + (rejected > 0 ? $"; {rejected} of {h.Rounds.Count} round(s) had no spectral gap after {n} singular values (noise or masking) and keep the prior" : "")));
        }
        if (targets.Count == 0) return;
        if (!options.UseSubstationMeter || view.SubstationMeterKw is null)
        {
            notes.Add("private-columns partial sums: no substation meter in the declared side information, so only the prior projection is reported");
            return;
        }
        if (view.FeatureIndex(Quantity.BaseLoad) < 0) return;
        if (targets.Count != view.Households.Count || view.Households.Any(h => h.SetpointKw is null))
        {
            notes.Add("substation-meter calibration needs every household's subspace and returned setpoints; skipped");
            return;
        }
        MeterCalibration(view, options, targets, bases, reconstructions);
    }

    private static void Project(Basis basis, double[] prior, double sp, double[] est, double[] var)
    {
        int r = basis.R;
        Span<double> c = stackalloc double[Math.Max(r, 1)];
        c.Clear();
        for (int i = 0; i < basis.Slots.Length; i++)
            for (int k = 0; k < r; k++) c[k] += basis.B[i * r + k] * prior[basis.Slots[i]];
        for (int i = 0; i < basis.Slots.Length; i++)
        {
            double s = 0, d = 0;
            for (int k = 0; k < r; k++)
            {
                s += basis.B[i * r + k] * c[k];
                d += basis.B[i * r + k] * basis.B[i * r + k];
            }
            int t = basis.Slots[i];
            est[t] = Math.Max(0, s);
            var[t] = Math.Max(sp * sp * d, AttackPrior.TinyVariance);
        }
    }

    private static void MeterCalibration(AttackerView view, AttackOptions options, List<int> targets, Dictionary<int, List<Basis>> bases, List<Reconstruction> reconstructions)
    {
        int M = targets.Count, T = view.SlotCount;
        double[] meter = view.SubstationMeterKw!;
        var est = new double[M][];
        var var = new double[M][];
        var prior = new double[M][];
        var sp = new double[M];
        for (int i = 0; i < M; i++)
        {
            (est[i], var[i]) = AttackPrior.Fallback(view, options, targets[i], Quantity.BaseLoad);
            prior[i] = AttackPrior.Mean(view, options, targets[i], Quantity.BaseLoad);
            sp[i] = AttackPrior.Std(view, options, targets[i], Quantity.BaseLoad);
        }
        double sr = Math.Max(options.SubstationMeterStdKw, 1e-6);
        foreach (Basis first in bases[targets[0]])
        {
            var blocks = new Basis[M];
            bool ok = true;
            for (int i = 0; i < M && ok; i++)
            {
                Basis? b = bases[targets[i]].FirstOrDefault(x => x.Start == first.Start);
                if (b is null || !b.Slots.AsSpan().SequenceEqual(first.Slots)) ok = false;
                else blocks[i] = b;
            }
            if (!ok) continue;
            int rows = first.Slots.Length;
            var offset = new int[M + 1];
            for (int i = 0; i < M; i++) offset[i + 1] = offset[i] + blocks[i].R;
            int p = offset[M] + 2;
            // Design G (rows × p) and target y = meter − Σ setpoints − known loads.
            var g = new double[rows * p];
            var y = new double[rows];
            double meterScale = 0;
            for (int k = 0; k < rows; k++) meterScale += meter[first.Slots[k]] * meter[first.Slots[k]];
            meterScale = Math.Sqrt(meterScale / rows);
            if (!(meterScale > 0)) meterScale = 1;
            for (int k = 0; k < rows; k++)
            {
                int t = first.Slots[k];
                double v = meter[t] - (view.KnownOtherLoadKw?[t] ?? 0);
                foreach (HouseholdView h in view.Households) v -= h.SetpointKw![t];
                y[k] = v;
                for (int i = 0; i < M; i++)
                    for (int j = 0; j < blocks[i].R; j++) g[k * p + offset[i] + j] = blocks[i].B[k * blocks[i].R + j];
                g[k * p + p - 2] = 1;
                g[k * p + p - 1] = meter[t] * meter[t] / meterScale;
            }
            var nMat = new double[p * p];
            var rhs = new double[p];
            for (int k = 0; k < rows; k++)
            {
                ReadOnlySpan<double> gr = g.AsSpan(k * p, p);
                for (int a = 0; a < p; a++)
                {
                    double ga = gr[a];
                    if (ga == 0) continue;
                    rhs[a] += ga * y[k] / (sr * sr);
                    for (int b = 0; b <= a; b++) nMat[a * p + b] += ga * gr[b] / (sr * sr);
                }
            }
            for (int a = 0; a < p; a++)
                for (int b = a + 1; b < p; b++) nMat[a * p + b] = nMat[b * p + a];
            for (int i = 0; i < M; i++)
            {
                Basis bi = blocks[i];
                for (int j = 0; j < bi.R; j++)
                {
                    double c0 = 0;
                    for (int k = 0; k < rows; k++) c0 += bi.B[k * bi.R + j] * prior[i][first.Slots[k]];
                    int idx = offset[i] + j;
                    nMat[idx * p + idx] += 1 / (sp[i] * sp[i]);
                    rhs[idx] += c0 / (sp[i] * sp[i]);
                }
            }
            for (int a = p - 2; a < p; a++) nMat[a * p + a] += 1e-9 * (1 + nMat[a * p + a]);
            if (!DenseLinearAlgebra.CholeskyDecompose(nMat, p)) continue;
            DenseLinearAlgebra.CholeskySolve(nMat, p, rhs);
            // Posterior covariance columns of each household block, for the per-slot variance.
            var e = new double[p];
            for (int i = 0; i < M; i++)
            {
                Basis bi = blocks[i];
                var cov = new double[bi.R * bi.R];
                for (int j = 0; j < bi.R; j++)
                {
                    Array.Clear(e);
                    e[offset[i] + j] = 1;
                    DenseLinearAlgebra.CholeskySolve(nMat, p, e);
                    for (int l = 0; l < bi.R; l++) cov[l * bi.R + j] = e[offset[i] + l];
                }
                for (int k = 0; k < rows; k++)
                {
                    int t = first.Slots[k];
                    double s = 0, v = 0;
                    for (int j = 0; j < bi.R; j++)
                    {
                        s += bi.B[k * bi.R + j] * rhs[offset[i] + j];
                        for (int l = 0; l < bi.R; l++) v += bi.B[k * bi.R + j] * cov[j * bi.R + l] * bi.B[k * bi.R + l];
                    }
                    est[i][t] = Math.Max(0, s);
                    var[i][t] = Math.Max(v, AttackPrior.TinyVariance);
                }
            }
        }
        for (int i = 0; i < M; i++)
            reconstructions.Add(new Reconstruction(Channel.PartialSums, MeterCalibrationName, Quantity.BaseLoad, targets[i], est[i], var[i]));
    }
}
