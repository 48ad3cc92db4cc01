namespace FedGrid.Grid.Optimization;

/// <summary>
/// The cone K of a <see cref="ConeProgram"/>: a nonnegative orthant of dimension
/// <see cref="Nonnegative"/> followed by second-order (Lorentz) cones
/// <c>{ (t, u) : ‖u‖₂ ≤ t }</c> of the sizes in <see cref="SecondOrder"/> (each size counts t).
/// The rows of G and h are laid out in that order: first the orthant, then each cone in turn.
/// </summary>
public sealed class ConeDimensions
{
    private readonly int[] _soc;

    /// <summary>Creates the cone description.</summary>
    /// <exception cref="ArgumentException">A negative orthant dimension or a cone of size below 1.</exception>
    public ConeDimensions(int nonnegative, IReadOnlyList<int> secondOrder)
    {
        if (nonnegative < 0) throw new ArgumentException($"orthant dimension must be non-negative, got {nonnegative}");
        _soc = secondOrder.ToArray();
        for (int k = 0; k < _soc.Length; k++)
            if (_soc[k] < 1) throw new ArgumentException($"second-order cone {k} has size {_soc[k]}; sizes must be at least 1");
        Nonnegative = nonnegative;
        Dimension = nonnegative + _soc.Sum();
    }

    /// <summary>Dimension l of the nonnegative orthant.</summary>
    public int Nonnegative { get; }

    /// <summary>Sizes of the second-order cones, in row order.</summary>
    public ReadOnlySpan<int> SecondOrder => _soc;

    /// <summary>Number of second-order cones.</summary>
    public int SecondOrderCount => _soc.Length;

    /// <summary>Total number of cone rows (rows of G).</summary>
    public int Dimension { get; }

    /// <summary>Degree of the cone (l plus one per second-order cone), the ν of the barrier.</summary>
    public int Degree => Nonnegative + _soc.Length;
}

/// <summary>
/// A convex quadratic cone program in the standard form of Vandenberghe's CVXOPT notes
/// ("The CVXOPT linear and quadratic cone program solvers", 2010):
/// <code>
///   minimise   ½ xᵀ P x + qᵀ x + c₀
///   subject to A x = b,   G x + s = h,   s ∈ K
/// </code>
/// with P symmetric positive semidefinite (stored as its upper triangle), K described by
/// <see cref="Cones"/>. The sparsity patterns are fixed; <see cref="Q"/>, <see cref="B"/>,
/// <see cref="H"/> and the matrices' <see cref="SparseMatrix.Values"/> may be rewritten between
/// solves (a solver built on this program re-reads them every <see cref="InteriorPointSolver.Solve"/>).
/// Build one readably with <see cref="ConeProgramBuilder"/>.
/// </summary>
public sealed class ConeProgram
{
    private readonly double[] _q, _b, _h;
    private readonly int[] _socStart;

    /// <summary>Creates a program from its data; arrays are taken over, not copied.</summary>
    /// <exception cref="ArgumentException">Shapes disagree, P is not upper triangular, or data are not finite.</exception>
    public ConeProgram(SparseMatrix pUpper, double[] q, SparseMatrix a, double[] b, SparseMatrix g, double[] h,
        ConeDimensions cones, double objectiveConstant = 0)
    {
        int n = q.Length;
        if (pUpper.RowCount != n || pUpper.ColumnCount != n)
            throw new ArgumentException($"P is {pUpper.RowCount}×{pUpper.ColumnCount}, expected {n}×{n}");
        if (a.ColumnCount != n || a.RowCount != b.Length)
            throw new ArgumentException($"A is {a.RowCount}×{a.ColumnCount}, expected {b.Length}×{n}");
        if (g.ColumnCount != n || g.RowCount != h.Length)
            throw new ArgumentException($"G is {g.RowCount}×{g.ColumnCount}, expected {h.Length}×{n}");
        if (cones.Dimension != h.Length)
            throw new ArgumentException($"the cone has dimension {cones.Dimension} but G has {h.Length} rows");
        var cp = pUpper.ColumnPointers;
        var ri = pUpper.RowIndices;
        for (int j = 0; j < n; j++)
            for (int p = cp[j]; p < cp[j + 1]; p++)
                if (ri[p] > j) throw new ArgumentException($"P must be given as its upper triangle; entry ({ri[p]}, {j}) is below the diagonal");
        CheckFinite(q, "q");
        CheckFinite(b, "b");
        CheckFinite(h, "h");
        P = pUpper;
        A = a;
        G = g;
        _q = q;
        _b = b;
        _h = h;
        Cones = cones;
        ObjectiveConstant = objectiveConstant;
        _socStart = new int[cones.SecondOrderCount];
        int row = cones.Nonnegative;
        for (int k = 0; k < _socStart.Length; k++)
        {
            _socStart[k] = row;
            row += cones.SecondOrder[k];
        }
    }

    /// <summary>Number of variables n.</summary>
    public int VariableCount => _q.Length;

    /// <summary>Number of equality rows (rows of A).</summary>
    public int EqualityCount => _b.Length;

    /// <summary>Upper triangle of the objective's quadratic term P.</summary>
    public SparseMatrix P { get; }

    /// <summary>Equality constraint matrix A.</summary>
    public SparseMatrix A { get; }

    /// <summary>Cone constraint matrix G.</summary>
    public SparseMatrix G { get; }

    /// <summary>Linear objective term q (writable).</summary>
    public Span<double> Q => _q;

    /// <summary>Equality right-hand side b (writable).</summary>
    public Span<double> B => _b;

    /// <summary>Cone right-hand side h (writable).</summary>
    public Span<double> H => _h;

    internal double[] QArray => _q;
    internal double[] BArray => _b;
    internal double[] HArray => _h;

    /// <summary>The cone K.</summary>
    public ConeDimensions Cones { get; }

    /// <summary>Constant c₀ added to the objective (does not affect the solution).</summary>
    public double ObjectiveConstant { get; set; }

    /// <summary>Row of G where second-order cone <paramref name="cone"/> starts.</summary>
    public int SecondOrderRowStart(int cone) => _socStart[cone];

    /// <summary>Objective value ½xᵀPx + qᵀx + c₀ at <paramref name="x"/>.</summary>
    public double Objective(ReadOnlySpan<double> x)
    {
        double lin = 0;
        for (int j = 0; j < _q.Length; j++) lin += _q[j] * x[j];
        return 0.5 * QuadraticForm(x) + lin + ObjectiveConstant;
    }

    /// <summary>xᵀPx using the stored upper triangle.</summary>
    public double QuadraticForm(ReadOnlySpan<double> x)
    {
        double s = 0;
        var cp = P.ColumnPointers;
        var ri = P.RowIndices;
        var v = P.ValueArray;
        for (int j = 0; j < P.ColumnCount; j++)
            for (int p = cp[j]; p < cp[j + 1]; p++)
            {
                int i = ri[p];
                s += (i == j ? 1.0 : 2.0) * v[p] * x[i] * x[j];
            }
        return s;
    }

    private static void CheckFinite(double[] v, string name)
    {
        for (int i = 0; i < v.Length; i++)
            if (!double.IsFinite(v[i])) throw new ArgumentException($"{name}[{i}] is not finite ({v[i]})");
    }
}
