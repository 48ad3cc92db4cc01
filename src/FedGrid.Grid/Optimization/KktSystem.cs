namespace FedGrid.Grid.Optimization;

/// <summary>
/// The reduced KKT matrix of an interior-point step,
/// <code>
///   K = [ P     Aᵀ   Gᵀ  ]
///       [ A     0    0   ]
///       [ G     0   −WᵀW ]
/// </code>
/// (W the Nesterov–Todd scaling, block diagonal: diagonal on the orthant, a dense block per
/// second-order cone), assembled into a permuted upper-triangular CSC pattern analysed once,
/// factorised by <see cref="SparseLdl"/> with static regularisation +δ on the first block and −δ on
/// the others (making K quasi-definite), and solved with iterative refinement against the
/// unregularised K. The fill-reducing order is <see cref="MinimumDegreeOrdering"/> of K's pattern.
/// </summary>
internal sealed class KktSystem
{
    private readonly int _n, _p, _m, _size;
    private readonly int[] _perm, _iperm;
    private readonly int[] _kp, _ki;
    private readonly double[] _kv, _kf, _sign;
    private readonly int[] _destP, _destA, _destG, _destDiag, _destSoc;
    private readonly SparseLdl _ldl;
    private readonly double[] _b, _x, _r, _dx;
    private readonly ConeProgram _program;

    public KktSystem(ConeProgram program)
    {
        _program = program;
        int n = program.VariableCount, p = program.EqualityCount, mg = program.Cones.Dimension;
        _n = n;
        _p = p;
        _m = p + mg;
        _size = n + _m;
        int size = _size;

        // Source entries in original KKT indexing (row ≤ or ≥ col, symmetric anyway).
        var src = new List<(int I, int J)>();
        AddMatrix(src, program.P, 0, 0, transpose: false);
        AddMatrix(src, program.A, n, 0, transpose: false);
        AddMatrix(src, program.G, n + p, 0, transpose: false);
        int nP = program.P.NonZeroCount, nA = program.A.NonZeroCount, nG = program.G.NonZeroCount;
        for (int i = 0; i < size; i++) src.Add((i, i));
        int socStartSrc = src.Count;
        var cones = program.Cones;
        for (int k = 0; k < cones.SecondOrderCount; k++)
        {
            int start = n + p + program.SecondOrderRowStart(k), dim = cones.SecondOrder[k];
            for (int a = 0; a < dim; a++)
                for (int b = a + 1; b < dim; b++) src.Add((start + a, start + b));
        }

        var adj = new List<int>[size];
        for (int i = 0; i < size; i++) adj[i] = [];
        foreach (var (i, j) in src)
            if (i != j) adj[i].Add(j);
        _perm = MinimumDegreeOrdering.Compute(size, adj);
        _iperm = new int[size];
        for (int k = 0; k < size; k++) _iperm[_perm[k]] = k;

        var keys = new Dictionary<long, int>();
        var entries = new List<(int R, int C)>();
        var dest = new int[src.Count];
        for (int e = 0; e < src.Count; e++)
        {
            int a = _iperm[src[e].I], b = _iperm[src[e].J];
            int r = Math.Min(a, b), c = Math.Max(a, b);
            long key = (long)c * size + r;
            if (!keys.TryGetValue(key, out int id))
            {
                id = entries.Count;
                keys.Add(key, id);
                entries.Add((r, c));
            }
            dest[e] = id;
        }
        var order = Enumerable.Range(0, entries.Count).OrderBy(t => entries[t].C).ThenBy(t => entries[t].R).ToArray();
        var position = new int[entries.Count];
        _kp = new int[size + 1];
        _ki = new int[entries.Count];
        for (int t = 0; t < order.Length; t++)
        {
            var (r, c) = entries[order[t]];
            position[order[t]] = t;
            _ki[t] = r;
            _kp[c + 1]++;
        }
        for (int c = 0; c < size; c++) _kp[c + 1] += _kp[c];
        for (int e = 0; e < dest.Length; e++) dest[e] = position[dest[e]];
        _destP = dest[..nP];
        _destA = dest[nP..(nP + nA)];
        _destG = dest[(nP + nA)..(nP + nA + nG)];
        _destDiag = dest[(nP + nA + nG)..socStartSrc];
        _destSoc = dest[socStartSrc..];
        _kv = new double[entries.Count];
        _kf = new double[entries.Count];
        _sign = new double[size];
        for (int i = 0; i < size; i++) _sign[_iperm[i]] = i < n ? 1.0 : -1.0;
        _ldl = new SparseLdl(size, _kp, _ki);
        _b = new double[size];
        _x = new double[size];
        _r = new double[size];
        _dx = new double[size];
    }

    private static void AddMatrix(List<(int, int)> src, SparseMatrix m, int rowOffset, int colOffset, bool transpose)
    {
        var cp = m.ColumnPointers;
        var ri = m.RowIndices;
        for (int j = 0; j < m.ColumnCount; j++)
            for (int q = cp[j]; q < cp[j + 1]; q++)
                src.Add(transpose ? (j + colOffset, ri[q] + rowOffset) : (ri[q] + rowOffset, j + colOffset));
    }

    /// <summary>
    /// Refinement stops once ‖b − Kx‖∞ ≤ this × (1 + ‖b‖∞), or when a step gains less than a factor 4
    /// (the rounding floor). Newton directions need not be exact: residuals are recomputed from the
    /// data at every iteration.
    /// </summary>
    internal const double RefinementTolerance = 1e-9;

    /// <summary>Size of K (variables plus constraint rows).</summary>
    public int Size => _size;

    /// <summary>Stored entries of K's upper triangle.</summary>
    public int MatrixNonZeros => _ki.Length;

    /// <summary>Entries of L below the diagonal (the fill is this minus K's off-diagonal entries).</summary>
    public int FactorNonZeros => _ldl.FactorNonZeros;

    /// <summary>Pivots replaced in the last factorisation.</summary>
    public int RegularisedPivots => _ldl.RegularisedPivots;

    /// <summary>
    /// Writes K's values: the program's P (times <paramref name="pScale"/>), A and G, and −H on the constraint block where
    /// <paramref name="rowDiag"/> holds H's diagonal per constraint row (0 on equality rows) and
    /// <paramref name="socUpper"/> H's strictly upper entries of each cone block, row by row.
    /// Then factorises with static regularisation <paramref name="delta"/>.
    /// </summary>
    public bool Factor(double pScale, ReadOnlySpan<double> rowDiag, ReadOnlySpan<double> socUpper, double delta)
    {
        double[] kv = _kv, kf = _kf;
        Array.Clear(kv);
        var pv = _program.P.ValueArray;
        for (int e = 0; e < pv.Length; e++) kv[_destP[e]] += pScale * pv[e];
        var av = _program.A.ValueArray;
        for (int e = 0; e < av.Length; e++) kv[_destA[e]] += av[e];
        var gv = _program.G.ValueArray;
        for (int e = 0; e < gv.Length; e++) kv[_destG[e]] += gv[e];
        for (int i = 0; i < _m; i++) kv[_destDiag[_n + i]] -= rowDiag[i];
        for (int e = 0; e < socUpper.Length; e++) kv[_destSoc[e]] -= socUpper[e];
        Array.Copy(kv, kf, kv.Length);
        for (int i = 0; i < _size; i++) kf[_destDiag[i]] += i < _n ? delta : -delta;
        return _ldl.Factor(kf, _sign, 1e-13, Math.Max(delta, 1e-8));
    }

    /// <summary>
    /// Solves K [dx; dz] = rhs (original ordering) into <paramref name="solution"/>, refining up to
    /// <paramref name="refinementSteps"/> times against the unregularised K. Returns the final
    /// residual's infinity norm.
    /// </summary>
    public double Solve(ReadOnlySpan<double> rhs, Span<double> solution, int refinementSteps)
    {
        int size = _size;
        double[] b = _b, x = _x, r = _r, dx = _dx;
        double bnorm = 0;
        for (int i = 0; i < size; i++)
        {
            double v = rhs[_perm[i]];
            b[i] = v;
            x[i] = v;
            bnorm = Math.Max(bnorm, Math.Abs(v));
        }
        _ldl.Solve(x);
        double rnorm = Residual(b, x, r);
        for (int step = 0; step < refinementSteps && rnorm > RefinementTolerance * (1 + bnorm); step++)
        {
            Array.Copy(r, dx, size);
            _ldl.Solve(dx);
            for (int i = 0; i < size; i++) dx[i] += x[i];
            double trial = Residual(b, dx, r);
            if (!(trial < rnorm))
            {
                Residual(b, x, r);
                break;
            }
            Array.Copy(dx, x, size);
            bool slow = trial > 0.25 * rnorm; // at the rounding floor: further steps gain little
            rnorm = trial;
            if (slow) break;
        }
        for (int i = 0; i < size; i++) solution[_perm[i]] = x[i];
        return rnorm;
    }

    /// <summary>r = b − K x (unregularised K, permuted space); returns ‖r‖∞.</summary>
    private double Residual(double[] b, double[] x, double[] r)
    {
        int[] kp = _kp, ki = _ki;
        double[] kv = _kv;
        Array.Copy(b, r, _size);
        for (int j = 0; j < _size; j++)
        {
            double xj = x[j], s = 0;
            for (int q = kp[j]; q < kp[j + 1]; q++)
            {
                int i = ki[q];
                double v = kv[q];
                r[i] -= v * xj;
                if (i != j) s += v * x[i];
            }
            r[j] -= s;
        }
        double norm = 0;
        for (int i = 0; i < _size; i++) norm = Math.Max(norm, Math.Abs(r[i]));
        return norm;
    }
}
