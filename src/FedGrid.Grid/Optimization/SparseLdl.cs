namespace FedGrid.Grid.Optimization;

/// <summary>
/// Sparse LDLᵀ factorisation of a symmetric quasi-definite matrix, up-looking, after Davis,
/// "Algorithm 849: A concise sparse Cholesky factorization package" (ACM TOMS 2005): the
/// symbolic phase builds the elimination tree and column counts of L once per pattern; the numeric
/// phase computes each row of L by a sparse triangular solve whose pattern is the reach of the row
/// in the elimination tree. Quasi-definite matrices (Vanderbei 1995) factor stably in any symmetric
/// order with diagonal D of known signs; a pivot of the wrong sign or too small a magnitude is
/// replaced by sign·δ (dynamic regularisation), and the caller removes the perturbation's effect
/// by iterative refinement. The matrix is given, already permuted, as its upper triangle in CSC
/// form with every diagonal entry stored. Nothing is allocated after construction.
/// </summary>
internal sealed class SparseLdl
{
    private readonly int _n;
    private readonly int[] _ap, _ai;
    private readonly int[] _lp, _li, _parent, _lnz, _flag, _pattern;
    private readonly double[] _lx, _d, _y;

    public SparseLdl(int n, int[] ap, int[] ai)
    {
        _n = n;
        _ap = ap;
        _ai = ai;
        _parent = new int[n];
        _lnz = new int[n];
        _flag = new int[n];
        _pattern = new int[n];
        _y = new double[n];
        _d = new double[n];
        _lp = new int[n + 1];
        for (int k = 0; k < n; k++)
        {
            _parent[k] = -1;
            _flag[k] = k;
            _lnz[k] = 0;
            for (int p = ap[k]; p < ap[k + 1]; p++)
            {
                int i = ai[p];
                if (i >= k) continue;
                for (; _flag[i] != k; i = _parent[i])
                {
                    if (_parent[i] == -1) _parent[i] = k;
                    _lnz[i]++;
                    _flag[i] = k;
                }
            }
        }
        for (int k = 0; k < n; k++) _lp[k + 1] = _lp[k] + _lnz[k];
        _li = new int[_lp[n]];
        _lx = new double[_lp[n]];
    }

    /// <summary>Entries of L below the diagonal.</summary>
    public int FactorNonZeros => _lp[_n];

    /// <summary>Pivots replaced by dynamic regularisation in the last factorisation.</summary>
    public int RegularisedPivots { get; private set; }

    /// <summary>
    /// Numeric factorisation of the values <paramref name="ax"/> (same pattern as given to the
    /// constructor). <paramref name="sign"/> holds the expected sign (+1/−1) of each pivot.
    /// Returns false if a pivot is not finite.
    /// </summary>
    public bool Factor(double[] ax, ReadOnlySpan<double> sign, double pivotThreshold, double pivotReplacement)
    {
        int n = _n;
        int[] ap = _ap, ai = _ai, lp = _lp, li = _li, parent = _parent, lnz = _lnz, flag = _flag, pattern = _pattern;
        double[] lx = _lx, d = _d, y = _y;
        int replaced = 0;
        for (int k = 0; k < n; k++)
        {
            y[k] = 0;
            int top = n;
            flag[k] = k;
            lnz[k] = 0;
            for (int p = ap[k]; p < ap[k + 1]; p++)
            {
                int i = ai[p];
                y[i] += ax[p];
                int len = 0;
                for (; flag[i] != k; i = parent[i])
                {
                    pattern[len++] = i;
                    flag[i] = k;
                }
                while (len > 0) pattern[--top] = pattern[--len];
            }
            double dk = y[k];
            y[k] = 0;
            for (; top < n; top++)
            {
                int i = pattern[top];
                double yi = y[i];
                y[i] = 0;
                int p2 = lp[i] + lnz[i];
                for (int p = lp[i]; p < p2; p++) y[li[p]] -= lx[p] * yi;
                double lki = yi / d[i];
                dk -= lki * yi;
                li[p2] = k;
                lx[p2] = lki;
                lnz[i]++;
            }
            if (!double.IsFinite(dk)) return false;
            if (sign[k] * dk < pivotThreshold)
            {
                dk = sign[k] * pivotReplacement;
                replaced++;
            }
            d[k] = dk;
        }
        RegularisedPivots = replaced;
        return true;
    }

    /// <summary>Solves L D Lᵀ x = b in place (x holds b on entry).</summary>
    public void Solve(Span<double> x)
    {
        int n = _n;
        int[] lp = _lp, li = _li;
        double[] lx = _lx, d = _d;
        for (int j = 0; j < n; j++)
        {
            double xj = x[j];
            if (xj == 0) continue;
            for (int p = lp[j]; p < lp[j + 1]; p++) x[li[p]] -= lx[p] * xj;
        }
        for (int j = 0; j < n; j++) x[j] /= d[j];
        for (int j = n - 1; j >= 0; j--)
        {
            double s = x[j];
            for (int p = lp[j]; p < lp[j + 1]; p++) s -= lx[p] * x[li[p]];
            x[j] = s;
        }
    }
}
