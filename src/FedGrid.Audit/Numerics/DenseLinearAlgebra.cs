namespace FedGrid.Audit.Numerics;

/// <summary>
/// A thin singular value decomposition A = U·diag(S)·Vᵀ of a rows × cols matrix, k = min(rows, cols):
/// U is rows × k, V is cols × k (both row-major, orthonormal columns), S falls (S[0] largest).
/// </summary>
/// <param name="Rows">Rows of A.</param>
/// <param name="Cols">Columns of A.</param>
/// <param name="U">Left singular vectors, rows × k, row-major.</param>
/// <param name="S">Singular values, largest first, length k.</param>
/// <param name="V">Right singular vectors, cols × k, row-major.</param>
public sealed record SvdResult(int Rows, int Cols, double[] U, double[] S, double[] V)
{
    /// <summary>min(rows, cols).</summary>
    public int K => S.Length;

    /// <summary>Number of singular values above <paramref name="relativeTolerance"/> × the largest (0 for a zero matrix).</summary>
    /// <param name="relativeTolerance">Relative cut-off, e.g. 1e-10.</param>
    /// <returns>The numerical rank.</returns>
    public int Rank(double relativeTolerance)
    {
        if (S.Length == 0 || !(S[0] > 0)) return 0;
        int r = 0;
        while (r < S.Length && S[r] > relativeTolerance * S[0]) r++;
        return r;
    }

    /// <summary>Condition number S[0] / S[k−1] (infinity when the smallest is zero).</summary>
    public double ConditionNumber => S.Length == 0 ? double.PositiveInfinity : S[^1] > 0 ? S[0] / S[^1] : double.PositiveInfinity;
}

/// <summary>
/// The small dense linear algebra the auditor needs, on row-major spans of doubles: Householder QR,
/// one-sided Jacobi SVD (Hestenes 1958; Golub &amp; Van Loan, Matrix Computations, §8.6), least squares
/// by truncated SVD, Cholesky factorisation and solves.
/// </summary>
public static class DenseLinearAlgebra
{
    /// <summary>
    /// Householder QR in place of a rows × cols matrix (rows ≥ cols): afterwards R is in the upper triangle and the
    /// reflectors v (with v₀ = 1 implied) below the diagonal; H_k = I − τ_k v vᵀ and Q = H₀H₁…H_{cols−1}.
    /// </summary>
    /// <param name="a">The matrix, overwritten.</param>
    /// <param name="rows">Rows.</param>
    /// <param name="cols">Columns (at most rows).</param>
    /// <param name="tau">Receives the cols reflector scalars.</param>
    public static void QrDecompose(Span<double> a, int rows, int cols, Span<double> tau)
    {
        if (rows < cols) throw new ArgumentException($"QR needs rows ≥ cols, got {rows} × {cols}");
        if (a.Length < rows * cols || tau.Length < cols) throw new ArgumentException("buffer too small");
        for (int k = 0; k < cols; k++)
        {
            double norm2 = 0;
            for (int i = k; i < rows; i++) norm2 += a[i * cols + k] * a[i * cols + k];
            double x0 = a[k * cols + k];
            double norm = Math.Sqrt(norm2);
            if (norm == 0) { tau[k] = 0; continue; }
            double alpha = x0 >= 0 ? -norm : norm;
            double v0 = x0 - alpha;
            // v = (x − αe₁)/v0, so v₀ = 1; τ = 2/(vᵀv) = −v0/α.
            for (int i = k + 1; i < rows; i++) a[i * cols + k] /= v0;
            tau[k] = -v0 / alpha;
            a[k * cols + k] = alpha;
            for (int j = k + 1; j < cols; j++)
            {
                double dot = a[k * cols + j];
                for (int i = k + 1; i < rows; i++) dot += a[i * cols + k] * a[i * cols + j];
                dot *= tau[k];
                a[k * cols + j] -= dot;
                for (int i = k + 1; i < rows; i++) a[i * cols + j] -= dot * a[i * cols + k];
            }
        }
    }

    /// <summary>Overwrites <paramref name="b"/> (length rows) with Qᵀb, Q from <see cref="QrDecompose"/>.</summary>
    /// <param name="qr">The factored matrix.</param>
    /// <param name="rows">Rows.</param>
    /// <param name="cols">Columns.</param>
    /// <param name="tau">Reflector scalars.</param>
    /// <param name="b">Vector, overwritten.</param>
    public static void ApplyQTranspose(ReadOnlySpan<double> qr, int rows, int cols, ReadOnlySpan<double> tau, Span<double> b)
    {
        for (int k = 0; k < cols; k++) Reflect(qr, rows, cols, tau[k], k, b);
    }

    /// <summary>Overwrites <paramref name="b"/> (length rows) with Qb, Q from <see cref="QrDecompose"/>.</summary>
    /// <param name="qr">The factored matrix.</param>
    /// <param name="rows">Rows.</param>
    /// <param name="cols">Columns.</param>
    /// <param name="tau">Reflector scalars.</param>
    /// <param name="b">Vector, overwritten.</param>
    public static void ApplyQ(ReadOnlySpan<double> qr, int rows, int cols, ReadOnlySpan<double> tau, Span<double> b)
    {
        for (int k = cols - 1; k >= 0; k--) Reflect(qr, rows, cols, tau[k], k, b);
    }

    private static void Reflect(ReadOnlySpan<double> qr, int rows, int cols, double tau, int k, Span<double> b)
    {
        if (tau == 0) return;
        double dot = b[k];
        for (int i = k + 1; i < rows; i++) dot += qr[i * cols + k] * b[i];
        dot *= tau;
        b[k] -= dot;
        for (int i = k + 1; i < rows; i++) b[i] -= dot * qr[i * cols + k];
    }

    /// <summary>
    /// Thin SVD of a rows × cols row-major matrix. Tall matrices are first reduced by Householder QR, then the
    /// square factor is diagonalised by one-sided Jacobi rotations (accurate to working precision in every
    /// singular value, small ones included).
    /// </summary>
    /// <param name="a">The matrix (not changed).</param>
    /// <param name="rows">Rows.</param>
    /// <param name="cols">Columns.</param>
    /// <returns>The decomposition.</returns>
    public static SvdResult Svd(ReadOnlySpan<double> a, int rows, int cols)
    {
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(rows);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(cols);
        if (a.Length < rows * cols) throw new ArgumentException("matrix buffer too small");
        if (rows < cols)
        {
            var t = new double[rows * cols];
            for (int i = 0; i < rows; i++)
                for (int j = 0; j < cols; j++) t[j * rows + i] = a[i * cols + j];
            SvdResult st = Svd(t, cols, rows);
            return new SvdResult(rows, cols, st.V, st.S, st.U);
        }
        if (rows > cols)
        {
            var qr = a[..(rows * cols)].ToArray();
            var tau = new double[cols];
            QrDecompose(qr, rows, cols, tau);
            var r = new double[cols * cols];
            for (int i = 0; i < cols; i++)
                for (int j = i; j < cols; j++) r[i * cols + j] = qr[i * cols + j];
            SvdResult sr = JacobiSquare(r, cols);
            var u = new double[rows * cols];
            var col = new double[rows];
            for (int j = 0; j < cols; j++)
            {
                Array.Clear(col);
                for (int i = 0; i < cols; i++) col[i] = sr.U[i * cols + j];
                ApplyQ(qr, rows, cols, tau, col);
                for (int i = 0; i < rows; i++) u[i * cols + j] = col[i];
            }
            return new SvdResult(rows, cols, u, sr.S, sr.V);
        }
        return JacobiSquare(a[..(rows * cols)].ToArray(), rows);
    }

    // One-sided Jacobi on the columns of a square n × n matrix (given row-major, consumed).
    private static SvdResult JacobiSquare(double[] a, int n)
    {
        // Work on columns stored as rows of bt (column-major copy) for locality.
        var bt = new double[n * n];
        for (int i = 0; i < n; i++)
            for (int j = 0; j < n; j++) bt[j * n + i] = a[i * n + j];
        var vt = new double[n * n];
        for (int j = 0; j < n; j++) vt[j * n + j] = 1;
        const double eps = 2.220446049250313e-16;
        for (int sweep = 0; sweep < 60; sweep++)
        {
            bool rotated = false;
            for (int p = 0; p < n - 1; p++)
            {
                Span<double> bp = bt.AsSpan(p * n, n);
                for (int q = p + 1; q < n; q++)
                {
                    Span<double> bq = bt.AsSpan(q * n, n);
                    double alpha = 0, beta = 0, gamma = 0;
                    for (int i = 0; i < n; i++)
                    {
                        alpha += bp[i] * bp[i];
                        beta += bq[i] * bq[i];
                        gamma += bp[i] * bq[i];
                    }
                    if (gamma == 0 || Math.Abs(gamma) <= eps * Math.Sqrt(alpha * beta)) continue;
                    rotated = true;
                    double zeta = (beta - alpha) / (2 * gamma);
                    double t = Math.Sign(zeta == 0 ? 1 : zeta) / (Math.Abs(zeta) + Math.Sqrt(1 + zeta * zeta));
                    double c = 1 / Math.Sqrt(1 + t * t), sn = c * t;
                    for (int i = 0; i < n; i++)
                    {
                        double x = bp[i], y = bq[i];
                        bp[i] = c * x - sn * y;
                        bq[i] = sn * x + c * y;
                    }
                    Span<double> vp = vt.AsSpan(p * n, n), vq = vt.AsSpan(q * n, n);
                    for (int i = 0; i < n; i++)
                    {
                        double x = vp[i], y = vq[i];
                        vp[i] = c * x - sn * y;
                        vq[i] = sn * x + c * y;
                    }
                }
            }
            if (!rotated) break;
        }
        var sv = new double[n];
        for (int j = 0; j < n; j++)
        {
            double s2 = 0;
            for (int i = 0; i < n; i++) s2 += bt[j * n + i] * bt[j * n + i];
            sv[j] = Math.Sqrt(s2);
        }
        int[] order = Enumerable.Range(0, n).ToArray();
        Array.Sort(order, (x, y) => sv[y].CompareTo(sv[x]));
        var u = new double[n * n];
        var v = new double[n * n];
        var s = new double[n];
        for (int k = 0; k < n; k++)
        {
            int j = order[k];
            s[k] = sv[j];
            for (int i = 0; i < n; i++)
            {
                u[i * n + k] = sv[j] > 0 ? bt[j * n + i] / sv[j] : (i == k ? 1 : 0);
                v[i * n + k] = vt[j * n + i];
            }
        }
        return new SvdResult(n, n, u, s, v);
    }

    /// <summary>
    /// Minimum-norm least-squares solution of A x ≈ b by the truncated SVD: singular values at or below
    /// <paramref name="relativeTolerance"/> × the largest are dropped.
    /// </summary>
    /// <param name="svd">SVD of A (rows × cols).</param>
    /// <param name="b">Right-hand side, length rows.</param>
    /// <param name="x">Receives the solution, length cols.</param>
    /// <param name="relativeTolerance">Rank cut-off.</param>
    /// <returns>The rank used.</returns>
    public static int SolveLeastSquares(SvdResult svd, ReadOnlySpan<double> b, Span<double> x, double relativeTolerance = 1e-12)
    {
        ArgumentNullException.ThrowIfNull(svd);
        int rank = svd.Rank(relativeTolerance), k = svd.K, m = svd.Rows, n = svd.Cols;
        x[..n].Clear();
        for (int j = 0; j < rank; j++)
        {
            double c = 0;
            for (int i = 0; i < m; i++) c += svd.U[i * k + j] * b[i];
            c /= svd.S[j];
            for (int i = 0; i < n; i++) x[i] += c * svd.V[i * k + j];
        }
        return rank;
    }

    /// <summary>Least squares min ‖A x − b‖ (minimum norm when rank-deficient); returns the rank used.</summary>
    /// <param name="a">Row-major rows × cols matrix.</param>
    /// <param name="rows">Rows.</param>
    /// <param name="cols">Columns.</param>
    /// <param name="b">Right-hand side, length rows.</param>
    /// <param name="x">Receives the solution, length cols.</param>
    /// <returns>The rank used.</returns>
    public static int SolveLeastSquares(ReadOnlySpan<double> a, int rows, int cols, ReadOnlySpan<double> b, Span<double> x) =>
        SolveLeastSquares(Svd(a, rows, cols), b, x);

    /// <summary>Cholesky factorisation A = L Lᵀ in place of a symmetric positive definite n × n matrix (L in the lower triangle).</summary>
    /// <param name="a">Matrix, overwritten with L (upper triangle left as is).</param>
    /// <param name="n">Order.</param>
    /// <returns>False when A is not (numerically) positive definite.</returns>
    public static bool CholeskyDecompose(Span<double> a, int n)
    {
        for (int j = 0; j < n; j++)
        {
            double d = a[j * n + j];
            for (int k = 0; k < j; k++) d -= a[j * n + k] * a[j * n + k];
            if (!(d > 0)) return false;
            double l = Math.Sqrt(d);
            a[j * n + j] = l;
            for (int i = j + 1; i < n; i++)
            {
                double s = a[i * n + j];
                for (int k = 0; k < j; k++) s -= a[i * n + k] * a[j * n + k];
                a[i * n + j] = s / l;
            }
        }
        return true;
    }

    /// <summary>Solves L Lᵀ x = b in place with the factor from <see cref="CholeskyDecompose"/>.</summary>
    /// <param name="l">The factor.</param>
    /// <param name="n">Order.</param>
    /// <param name="b">Right-hand side, overwritten with x.</param>
    public static void CholeskySolve(ReadOnlySpan<double> l, int n, Span<double> b)
    {
        for (int i = 0; i < n; i++)
        {
            double s = b[i];
            for (int k = 0; k < i; k++) s -= l[i * n + k] * b[k];
            b[i] = s / l[i * n + i];
        }
        for (int i = n - 1; i >= 0; i--)
        {
            double s = b[i];
            for (int k = i + 1; k < n; k++) s -= l[k * n + i] * b[k];
            b[i] = s / l[i * n + i];
        }
    }
    /// <summary>
    /// The leading <paramref name="k"/> singular triplets of a rows × cols matrix by a seeded randomised range finder
    /// (Halko, Martinsson &amp; Tropp 2011, algorithm 4.1 with one power iteration): exact up to rounding when the
    /// rank of A is below k, the usual case for partial sums of an n-feature block with k &gt; n.
    /// </summary>
    /// <param name="a">Row-major matrix.</param>
    /// <param name="rows">Rows.</param>
    /// <param name="cols">Columns.</param>
    /// <param name="k">Sketch size (clamped to min(rows, cols)).</param>
    /// <param name="seed">Seed of the Gaussian test matrix.</param>
    /// <returns>U (rows × k), S (k), V (cols × k) of the sketch.</returns>
    public static SvdResult LeadingSvd(ReadOnlySpan<double> a, int rows, int cols, int k, int seed)
    {
        k = Math.Min(k, Math.Min(rows, cols));
        if (k >= Math.Min(rows, cols) - 2) return Svd(a, rows, cols);
        var rng = new Random(seed);
        var omega = new double[cols * k];
        for (int i = 0; i < omega.Length; i++)
        {
            double u1 = 1 - rng.NextDouble(), u2 = rng.NextDouble();
            omega[i] = Math.Sqrt(-2 * Math.Log(u1)) * Math.Cos(2 * Math.PI * u2);
        }
        var y = new double[rows * k];
        MultiplyInto(a, rows, cols, omega, k, y);
        Orthonormalise(y, rows, k);
        // One power iteration: Y = A (Aᵀ Q).
        var z = new double[cols * k];
        for (int i = 0; i < rows; i++)
            for (int c = 0; c < cols; c++)
            {
                double aic = a[i * cols + c];
                if (aic == 0) continue;
                for (int j = 0; j < k; j++) z[c * k + j] += aic * y[i * k + j];
            }
        Orthonormalise(z, cols, k);
        Array.Clear(y);
        MultiplyInto(a, rows, cols, z, k, y);
        Orthonormalise(y, rows, k);
        // B = Qᵀ A (k × cols); SVD of B; U = Q U_B.
        var b = new double[k * cols];
        for (int i = 0; i < rows; i++)
            for (int j = 0; j < k; j++)
            {
                double q = y[i * k + j];
                if (q == 0) continue;
                for (int c = 0; c < cols; c++) b[j * cols + c] += q * a[i * cols + c];
            }
        SvdResult sb = Svd(b, k, cols);
        var u = new double[rows * k];
        for (int i = 0; i < rows; i++)
            for (int j = 0; j < k; j++)
            {
                double s = 0;
                for (int l = 0; l < k; l++) s += y[i * k + l] * sb.U[l * k + j];
                u[i * k + j] = s;
            }
        return new SvdResult(rows, cols, u, sb.S, sb.V);
    }

    private static void MultiplyInto(ReadOnlySpan<double> a, int rows, int cols, double[] x, int k, double[] y)
    {
        for (int i = 0; i < rows; i++)
            for (int c = 0; c < cols; c++)
            {
                double aic = a[i * cols + c];
                if (aic == 0) continue;
                for (int j = 0; j < k; j++) y[i * k + j] += aic * x[c * k + j];
            }
    }

    // Modified Gram–Schmidt twice on the k columns of a rows × k row-major matrix (zero columns stay zero).
    private static void Orthonormalise(double[] y, int rows, int k)
    {
        for (int pass = 0; pass < 2; pass++)
            for (int j = 0; j < k; j++)
            {
                for (int l = 0; l < j; l++)
                {
                    double d = 0;
                    for (int i = 0; i < rows; i++) d += y[i * k + l] * y[i * k + j];
                    for (int i = 0; i < rows; i++) y[i * k + j] -= d * y[i * k + l];
                }
                double n2 = 0;
                for (int i = 0; i < rows; i++) n2 += y[i * k + j] * y[i * k + j];
                double n = Math.Sqrt(n2);
                for (int i = 0; i < rows; i++) y[i * k + j] = n > 1e-300 ? y[i * k + j] / n : 0;
            }
    }
}
