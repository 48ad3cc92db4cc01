using FedGrid.Audit.Numerics;

namespace FedGrid.Audit.Attacks;

/// <summary>
/// Partial sums under the plain scheme: the coordinator broadcast W_m, so each a_m(t) = W_m x_m(t) is inverted
/// by least squares (exact when W_m has full column rank, i.e. with at least as many first-layer neurons as
/// features). Rank-deficient directions keep the prior: x = x₀ + W⁺(a − W x₀).
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
            var x0 = new double[n];
            var x = new double[n];
            var resid = new double[hN];
            int minRank = n;
            double maxCond = 0, maxBound = 0;
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
                for (int t = round.StartSlot; t < Math.Min(T, round.StartSlot + round.SlotCount); t++)
                {
                    ReadOnlySpan<double> a = h.PartialSums.AsSpan(t * hN, hN);
                    if (!double.IsFinite(a[0])) continue;
                    for (int j = 0; j < n; j++)
                    {
                        InputFeature f = view.Features[j];
                        x0[j] = f.Quantity is { } q && est.TryGetValue(q, out var e) ? (e.E[t] - f.OffsetKw) / f.KwPerUnit
                              : view.PublicFeatureValues is { } pv ? pv[t * n + j] : 0;
                    }
                    double aRms = 0;
                    for (int o = 0; o < hN; o++)
                    {
                        double s = 0;
                        for (int j = 0; j < n; j++) s += w[o * n + j] * x0[j];
                        resid[o] = a[o] - s;
                        aRms += a[o] * a[o];
                    }
                    aRms = Math.Sqrt(aRms / hN);
                    DenseLinearAlgebra.SolveLeastSquares(svd, resid, x, 1e-10);
                    double sigma = Float32UnitRoundoff * Math.Max(aRms, 1e-30);
                    for (int j = 0; j < n; j++)
                    {
                        InputFeature f = view.Features[j];
                        if (f.Quantity is not { } q || !est.TryGetValue(q, out var e)) continue;
                        e.E[t] = f.OffsetKw + f.KwPerUnit * (x0[j] + x[j]);
                        if (rank == n)
                        {
                            double v = sigma * sigma * invGramDiag[j] * f.KwPerUnit * f.KwPerUnit;
                            e.V[t] = Math.Max(v, AttackPrior.TinyVariance);
                            if (j == baseIdx) maxBound = Math.Max(maxBound, Math.Sqrt(v));
                        }
                    }
                }
            }
            foreach (var (q, e) in est) reconstructions.Add(new Reconstruction(Channel.PartialSums, Name, q, m, e.E, e.V));
            identifiability.Add(new Identifiability(m, Channel.PartialSums, Name, minRank, n, maxCond,
                minRank == n ? maxBound : double.NaN,
                minRank == n
                    ? $"broadcast W_m has full column rank {n} in every round: a_m = W_m x_m is solved exactly up to float32 rounding (bound from σ = 2⁻²⁴·rms(a))"
                    : $"W_m has rank {minRank} < {n} features in some round: {n - minRank} direction(s) of x_m stay at the prior"));
        }
    }
}
