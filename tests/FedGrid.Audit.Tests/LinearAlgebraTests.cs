using System.Diagnostics;
using System.Globalization;
using System.Text;
using System.Text.Json;
using FedGrid.Audit.Numerics;

namespace FedGrid.Audit.Tests;

public sealed class LinearAlgebraTests
{
    [Fact]
    public void Svd_of_a_2x2_matrix_matches_the_hand_computed_values()
    {
        // [[3, 0], [4, 5]]: AᵀA = [[25, 20], [20, 25]] has eigenvalues 45 and 5, so σ = 3√5 and √5 (worked by hand).
        SvdResult svd = DenseLinearAlgebra.Svd([3, 0, 4, 5], 2, 2);
        Assert.Equal(3 * Math.Sqrt(5), svd.S[0], 12);
        Assert.Equal(Math.Sqrt(5), svd.S[1], 12);
        Assert.Equal(3.0, svd.ConditionNumber, 12);
        AssertReconstructs([3, 0, 4, 5], 2, 2, svd);
    }

    [Fact]
    public void Svd_of_tall_and_wide_matrices_reconstructs_with_orthonormal_factors()
    {
        var rng = new Random(7);
        foreach ((int m, int n) in new[] { (9, 4), (4, 9), (30, 30), (96, 12) })
        {
            double[] a = Enumerable.Range(0, m * n).Select(_ => rng.NextDouble() * 2 - 1).ToArray();
            SvdResult svd = DenseLinearAlgebra.Svd(a, m, n);
            AssertReconstructs(a, m, n, svd);
            int k = svd.K;
            for (int i = 0; i < k; i++)
                for (int j = 0; j < k; j++)
                {
                    double uu = 0, vv = 0;
                    for (int r = 0; r < m; r++) uu += svd.U[r * k + i] * svd.U[r * k + j];
                    for (int r = 0; r < n; r++) vv += svd.V[r * k + i] * svd.V[r * k + j];
                    Assert.Equal(i == j ? 1 : 0, uu, 10);
                    Assert.Equal(i == j ? 1 : 0, vv, 10);
                }
            for (int i = 1; i < k; i++) Assert.True(svd.S[i] <= svd.S[i - 1]);
        }
    }

    [Fact]
    public void Rank_of_a_rank_two_matrix_is_two()
    {
        // Rows are combinations of (1, 2, 3) and (0, 1, 1): rank 2 by construction.
        double[] a = [1, 2, 3, 0, 1, 1, 1, 3, 4, 2, 5, 7];
        SvdResult svd = DenseLinearAlgebra.Svd(a, 4, 3);
        Assert.Equal(2, svd.Rank(1e-10));
        Assert.True(svd.S[2] < 1e-12 * svd.S[0]);
    }

    [Fact]
    public void Least_squares_line_fit_matches_the_normal_equations_by_hand()
    {
        // Points (0,1), (1,3), (2,4), (3,4): slope = (nΣxy − ΣxΣy)/(nΣx² − (Σx)²) = (4·23 − 6·12)/(4·14 − 36) = 1, intercept = (12 − 6)/4 = 1.5.
        double[] a = [1, 0, 1, 1, 1, 2, 1, 3];
        double[] b = [1, 3, 4, 4];
        var x = new double[2];
        int rank = DenseLinearAlgebra.SolveLeastSquares(a, 4, 2, b, x);
        Assert.Equal(2, rank);
        Assert.Equal(1.5, x[0], 12);
        Assert.Equal(1.0, x[1], 12);
    }

    [Fact]
    public void Householder_qr_gives_an_orthogonal_q_and_solves_a_square_system()
    {
        double[] a = [2, -1, 0, -1, 2, -1, 0, -1, 2];
        double[] qr = (double[])a.Clone();
        var tau = new double[3];
        DenseLinearAlgebra.QrDecompose(qr, 3, 3, tau);
        // x = (1, 2, 3) gives b = A x = (0, 0, 4).
        double[] b = [0, 0, 4];
        DenseLinearAlgebra.ApplyQTranspose(qr, 3, 3, tau, b);
        var x = new double[3];
        for (int i = 2; i >= 0; i--)
        {
            double s = b[i];
            for (int j = i + 1; j < 3; j++) s -= qr[i * 3 + j] * x[j];
            x[i] = s / qr[i * 3 + i];
        }
        Assert.Equal(1, x[0], 12);
        Assert.Equal(2, x[1], 12);
        Assert.Equal(3, x[2], 12);
        double[] v = [0.3, -1.2, 2.5];
        double[] w = (double[])v.Clone();
        DenseLinearAlgebra.ApplyQ(qr, 3, 3, tau, w);
        DenseLinearAlgebra.ApplyQTranspose(qr, 3, 3, tau, w);
        for (int i = 0; i < 3; i++) Assert.Equal(v[i], w[i], 12);
    }

    [Fact]
    public void Cholesky_solves_a_known_system_and_rejects_an_indefinite_matrix()
    {
        double[] a = [4, 2, 2, 3];
        Assert.True(DenseLinearAlgebra.CholeskyDecompose(a, 2));
        Assert.Equal(2, a[0], 12);
        Assert.Equal(1, a[2], 12);
        Assert.Equal(Math.Sqrt(2), a[3], 12);
        double[] b = [8, 7]; // [[4,2],[2,3]] (1.25, 1.5) = (8, 7)
        DenseLinearAlgebra.CholeskySolve(a, 2, b);
        Assert.Equal(1.25, b[0], 12);
        Assert.Equal(1.5, b[1], 12);
        Assert.False(DenseLinearAlgebra.CholeskyDecompose(new double[] { 1, 2, 2, 1 }, 2));
    }

    [Theory]
    [InlineData(12, 5, 0)]
    [InlineData(5, 8, 1)]
    [InlineData(40, 6, 2)]
    public void Svd_and_least_squares_agree_with_numpy_and_scipy(int rows, int cols, int seed)
    {
        // Reference: numpy.linalg.svd and scipy.linalg.lstsq (LAPACK gelsd) via Debian's /usr/bin/python3.
        var rng = new Random(100 + seed);
        double[] a = Enumerable.Range(0, rows * cols).Select(_ => Math.Round(rng.NextDouble() * 4 - 2, 6)).ToArray();
        if (seed == 2)
            for (int i = 0; i < rows; i++) a[i * cols + cols - 1] = a[i * cols] + a[i * cols + 1]; // rank-deficient
        double[] b = Enumerable.Range(0, rows).Select(_ => Math.Round(rng.NextDouble() * 4 - 2, 6)).ToArray();
        using JsonDocument reference = RunReference(rows, cols, a, b);
        double[] s = reference.RootElement.GetProperty("s").EnumerateArray().Select(e => e.GetDouble()).ToArray();
        double[] xRef = reference.RootElement.GetProperty("x").EnumerateArray().Select(e => e.GetDouble()).ToArray();
        int rankRef = reference.RootElement.GetProperty("rank").GetInt32();
        SvdResult svd = DenseLinearAlgebra.Svd(a, rows, cols);
        Assert.Equal(s.Length, svd.K);
        for (int i = 0; i < s.Length; i++) Assert.True(Math.Abs(s[i] - svd.S[i]) <= 1e-10 * s[0], $"σ{i}: {svd.S[i]} vs numpy {s[i]}");
        var x = new double[cols];
        int rank = DenseLinearAlgebra.SolveLeastSquares(svd, b, x, 1e-10);
        Assert.Equal(rankRef, rank);
        for (int i = 0; i < cols; i++) Assert.True(Math.Abs(x[i] - xRef[i]) <= 1e-9 * (1 + Math.Abs(xRef[i])), $"x{i}: {x[i]} vs scipy {xRef[i]}");
    }

    private static JsonDocument RunReference(int rows, int cols, double[] a, double[] b)
    {
        var sb = new StringBuilder();
        sb.Append(CultureInfo.InvariantCulture, $"{{\"rows\":{rows},\"cols\":{cols},\"a\":[");
        sb.AppendJoin(',', a.Select(v => v.ToString("R", CultureInfo.InvariantCulture)));
        sb.Append("],\"b\":[").AppendJoin(',', b.Select(v => v.ToString("R", CultureInfo.InvariantCulture))).Append("]}");
        var psi = new ProcessStartInfo("/usr/bin/python3", Reference.Script("svd_lstsq.py"))
        {
            RedirectStandardInput = true, RedirectStandardOutput = true, RedirectStandardError = true,
        };
        using var p = Process.Start(psi)!;
        p.StandardInput.Write(sb.ToString());
        p.StandardInput.Close();
        string output = p.StandardOutput.ReadToEnd();
        string error = p.StandardError.ReadToEnd();
        p.WaitForExit();
        Assert.True(p.ExitCode == 0, "reference script failed: " + error);
        return JsonDocument.Parse(output);
    }

    private static void AssertReconstructs(double[] a, int m, int n, SvdResult svd)
    {
        int k = svd.K;
        for (int i = 0; i < m; i++)
            for (int j = 0; j < n; j++)
            {
                double s = 0;
                for (int l = 0; l < k; l++) s += svd.U[i * k + l] * svd.S[l] * svd.V[j * k + l];
                Assert.Equal(a[i * n + j], s, 10);
            }
    }
}

internal static class Reference
{
    public static string Script(string name)
    {
        string? dir = AppContext.BaseDirectory;
        while (dir is not null && !File.Exists(Path.Combine(dir, "tests", "reference", name))) dir = Path.GetDirectoryName(dir);
        return dir is null ? throw new FileNotFoundException($"tests/reference/{name} not found above {AppContext.BaseDirectory}") : Path.Combine(dir, "tests", "reference", name);
    }
}

public sealed class LeadingSvdTests
{
    [Fact]
    public void Leading_svd_of_a_low_rank_matrix_matches_the_full_svd()
    {
        // A = X Wᵀ with X 96 × 5 and W 40 × 5: rank 5; a sketch of 11 directions must reproduce σ1..σ5 and show σ6 ≈ 0.
        var rng = new Random(3);
        int m = 96, c = 40, r = 5;
        double[] x = Enumerable.Range(0, m * r).Select(_ => rng.NextDouble()).ToArray();
        double[] w = Enumerable.Range(0, c * r).Select(_ => rng.NextDouble() - 0.5).ToArray();
        var a = new double[m * c];
        for (int i = 0; i < m; i++)
            for (int j = 0; j < c; j++)
                for (int l = 0; l < r; l++) a[i * c + j] += x[i * r + l] * w[j * r + l];
        SvdResult full = DenseLinearAlgebra.Svd(a, m, c);
        SvdResult lead = DenseLinearAlgebra.LeadingSvd(a, m, c, r + 6, 1);
        Assert.Equal(r + 6, lead.K);
        for (int i = 0; i < r; i++) Assert.Equal(full.S[i], lead.S[i], 9);
        Assert.True(lead.S[r] < 1e-10 * lead.S[0]);
        // The leading left singular vectors span the same subspace: |⟨u_full, u_lead⟩| = 1 for the first.
        double dot = 0;
        for (int i = 0; i < m; i++) dot += full.U[i * full.K] * lead.U[i * lead.K];
        Assert.Equal(1, Math.Abs(dot), 9);
    }
}
