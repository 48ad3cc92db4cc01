using FedGrid.Audit.Numerics;

namespace FedGrid.Audit.Attacks;

/// <summary>
/// Partial sums under the plain scheme: the coordinator broadcast W_m, so each a_m(t) = W_m x_m(t) is inverted
/// by least squares (exact when W_m has full column rank, i.e. with at least as many first-layer neurons as
/// features). Written as the linear-Gaussian posterior mean: the observation noise σ is estimated from the
/// least-squares residual of each round (floored at float32 rounding), the prior x₀ holds the public features at
/// their known values and the private ones at the attacker's prior, so unidentified directions and noisy
/// observations fall back to the prior, and exact observations give the least-squares answer.
/// </summary>
public static class PartialSumInversion
{
    /// <summary>Attack name in results.</summary>
    public const string Name = "leastSquaresInversion";

    /// <summary>
    /// Relative rounding of the float32 partial sums (2⁻²⁴, unit roundoff of IEEE binary32), used as the
    /// observation noise of the Cramér–Rao-style bound σ²(WᵀW)⁻¹.
    /// </summary>
    public const double Float32UnitRoundoff = 5.9604644775390625e-8;

    /// <summary>A round whose fitted energy per direction is below this multiple of the residual energy per degree of freedom is rejected.</summary>
    public const double ModelCheckRatio = 10;

    /// <summary>Runs the attack on every household with broadcast weights; households without them are skipped.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="reconstructions">Receives one reconstruction per household and quantity.</param>
    /// <param name="identifiability">Receives one entry per attacked household.</param>
    public static void Run(AttackerView view, AttackOptions options, List<Reconstruction> reconstructions, List<Identifiability> identifiability)
    {
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(options);
        int n = view.FeatureCount, hN = view.FirstLayerSize, T = view.SlotCount;
        int baseIdx = view.FeatureIndex(Quantity.BaseLoad);
        for (int m = 0; m < view.Households.Count; m++)
        {
            HouseholdView h = view.Households[m];
            if (h.PartialSums is null || h.Rounds.Count == 0 || h.Rounds.Any(r => r.BroadcastWeights is null)) continue;
            var est = new Dictionary<Quantity, (double[] E, double[] V)>();
            foreach (Quantity q in AuditNames.Quantities)
                if (view.FeatureIndex(q) >= 0) est[q] = AttackPrior.Fallback(view, options, m, q);
            var a = new double[hN];
            var x0 = new double[n];
            var tau2 = new double[n];
            var x = new double[n];
            var nMat = new double[n * n];
            var rhs = new double[n];
            var e0 = new double[n];
            int minRank = n;
            double maxCond = 0, maxBound = 0, maxNoiseRatio = 0;
            int rejected = 0;
            foreach (RoundObservation round in h.Rounds)
            {
                double[] w = round.BroadcastWeights!;
                SvdResult svd = DenseLinearAlgebra.Svd(w, hN, n);
                int rank = svd.Rank(1e-10);
                minRank = Math.Min(minRank, rank);
                maxCond = Math.Max(maxCond, svd.ConditionNumber);
                // diag((WᵀW)⁻¹) over the identified directions.
                var invGramDiag = new double[n];
                for (int j = 0; j < n; j++)
                    for (int k = 0; k < rank; k++) invGramDiag[j] += svd.V[j * svd.K + k] * svd.V[j * svd.K + k] / (svd.S[k] * svd.S[k]);
                int t0 = round.StartSlot, t1 = Math.Min(T, round.StartSlot + round.SlotCount);
                // Observation noise of the round: least-squares residual (pooled, H₁ − rank degrees of freedom per slot),
                // floored at float32 rounding of the partial sums.
                double ssr = 0, ssa = 0, ssFit = 0;
                int dof = 0, fitted = 0;
                for (int t = t0; t < t1; t++)
                {
                    ReadOnlySpan<float> af = h.PartialSums.AsSpan(t * hN, hN);
                    for (int o = 0; o < hN; o++) a[o] = af[o];
                    if (!float.IsFinite(af[0])) continue;
                    DenseLinearAlgebra.SolveLeastSquares(svd, a, x, 1e-10);
                    for (int o = 0; o < hN; o++)
                    {
                        double s = 0;
                        for (int j = 0; j < n; j++) s += w[o * n + j] * x[j];
                        ssr += (a[o] - s) * (a[o] - s);
                        ssa += a[o] * a[o];
                        ssFit += s * s;
                    }
                    dof += hN - rank;
                    fitted += rank;
                }
                // Model check (an F ratio): energy per fitted direction against residual energy per degree of freedom. Observations
                // that do not come from W_m x_m (noise, masks) give a ratio near 1; the attacker then keeps its prior for the round.
                if (dof > 0 && fitted > 0 && ssFit / fitted < ModelCheckRatio * (ssr / dof)) { rejected++; continue; }
                double floor2 = Float32UnitRoundoff * Float32UnitRoundoff * ssa / Math.Max(1, (t1 - t0) * hN);
                double sigma2 = Math.Max(dof > 0 ? ssr / dof : 0, floor2);
                maxNoiseRatio = Math.Max(maxNoiseRatio, Math.Sqrt(sigma2 / Math.Max(floor2, 1e-300)));
                for (int t = t0; t < t1; t++)
                {
                    ReadOnlySpan<float> af = h.PartialSums.AsSpan(t * hN, hN);
                    for (int o = 0; o < hN; o++) a[o] = af[o];
                    if (!float.IsFinite(af[0])) continue;
                    // Gaussian prior on x: the attacker's prior for private features, the known value for public ones.
                    for (int j = 0; j < n; j++)
                    {
                        InputFeature f = view.Features[j];
                        if (f.Quantity is { } q && est.TryGetValue(q, out var e))
                        {
                            x0[j] = (e.E[t] - f.OffsetKw) / f.KwPerUnit;
                            double sd = AttackPrior.Std(view, options, m, q) / Math.Abs(f.KwPerUnit);
                            tau2[j] = sd * sd;
                        }
                        else if (f.IsPublic && view.PublicFeatureValues is { } pv && double.IsFinite(pv[t * n + j])) { x0[j] = pv[t * n + j]; tau2[j] = 1e-12 * (1 + x0[j] * x0[j]); }
                        else { x0[j] = 0; tau2[j] = 1e12; }
                    }
                    // MAP: (WᵀW/σ² + diag(1/τ²)) x = Wᵀa/σ² + x₀/τ² (least squares when σ is float32 rounding).
                    for (int i = 0; i < n; i++)
                    {
                        double r = x0[i] / tau2[i];
                        for (int o = 0; o < hN; o++) r += w[o * n + i] * a[o] / sigma2;
                        rhs[i] = r;
                        for (int j = 0; j <= i; j++)
                        {
                            double g = 0;
                            for (int o = 0; o < hN; o++) g += w[o * n + i] * w[o * n + j];
                            nMat[i * n + j] = nMat[j * n + i] = g / sigma2 + (i == j ? 1 / tau2[i] : 0);
                        }
                    }
                    if (!DenseLinearAlgebra.CholeskyDecompose(nMat, n)) continue;
                    rhs.AsSpan().CopyTo(x);
                    DenseLinearAlgebra.CholeskySolve(nMat, n, x);
                    for (int j = 0; j < n; j++)
                    {
                        InputFeature f = view.Features[j];
                        if (f.Quantity is not { } q || !est.TryGetValue(q, out var e)) continue;
                        Array.Clear(e0);
                        e0[j] = 1;
                        DenseLinearAlgebra.CholeskySolve(nMat, n, e0);
                        e.E[t] = f.OffsetKw + f.KwPerUnit * x[j];
                        e.V[t] = Math.Max(e0[j] * f.KwPerUnit * f.KwPerUnit, AttackPrior.TinyVariance);
                        if (j == baseIdx && rank == n) maxBound = Math.Max(maxBound, Math.Sqrt(sigma2 * invGramDiag[j]) * Math.Abs(f.KwPerUnit));
                    }
                }
            }
            foreach (var (q, e) in est) reconstructions.Add(new Reconstruction(Channel.PartialSums, Name, q, m, e.E, e.V));
            identifiability.Add(new Identifiability(m, Channel.PartialSums, Name, minRank, n, maxCond,
                minRank == n ? maxBound : double.NaN,
                (minRank == n
                    ? $"broadcast W_m has full column rank {n} in every round: a_m = W_m x_m is solved by least squares; bound σ²(WᵀW)⁻¹ with σ the larger of the residual and float32 rounding (2⁻²⁴·rms a)"
                    : $"W_m has rank {minRank} < {n} features in some round: {n - minRank} direction(s) of x_m stay at the prior")
                + (rejected > 0 ? $"; {rejected} of {h.Rounds.Count} round(s) do not fit a_m = W_m x_m (residual as large as the fit: noise or masking) and keep the prior" : "")
                + (maxNoiseRatio > 10 ? $"; observations are noisier than float32 rounding by up to ×{maxNoiseRatio:G3} (noise or inconsistency), so the estimate leans on the prior" : "")));
        }
    }
}
