namespace FedGrid.Grid.Optimization;

/// <summary>A decision variable of a program under construction (its column in the program).</summary>
/// <param name="Index">Column index of the variable.</param>
public readonly record struct Variable(int Index);

/// <summary>
/// An affine expression Σ cᵢ xᵢ + constant, built fluently:
/// <c>LinearExpression.Of(p, 1).Add(l, -r).Plus(0.5)</c>. Terms on the same variable are summed.
/// Used only while building a program (it allocates).
/// </summary>
public sealed class LinearExpression
{
    private readonly List<(int Index, double Coefficient)> _terms = [];

    /// <summary>The constant part.</summary>
    public double Constant { get; private set; }

    /// <summary>The terms, in the order added (duplicates not yet merged).</summary>
    public IReadOnlyList<(int Index, double Coefficient)> Terms => _terms;

    /// <summary>An expression with one term.</summary>
    public static LinearExpression Of(Variable v, double coefficient = 1.0) => new LinearExpression().Add(v, coefficient);

    /// <summary>A constant expression.</summary>
    public static LinearExpression OfConstant(double constant) => new LinearExpression().Plus(constant);

    /// <summary>Adds coefficient · v.</summary>
    public LinearExpression Add(Variable v, double coefficient = 1.0)
    {
        if (!double.IsFinite(coefficient)) throw new ArgumentException($"coefficient of variable {v.Index} is not finite ({coefficient})");
        if (coefficient != 0) _terms.Add((v.Index, coefficient));
        return this;
    }

    /// <summary>Adds a constant.</summary>
    public LinearExpression Plus(double constant)
    {
        if (!double.IsFinite(constant)) throw new ArgumentException($"constant is not finite ({constant})");
        Constant += constant;
        return this;
    }
}

/// <summary>
/// Builds a <see cref="ConeProgram"/> so that a formulation reads like its mathematics: add
/// variables with bounds, linear equalities and inequalities, second-order cones ‖u‖ ≤ t over
/// affine expressions, and quadratic and linear objective terms. Every constraint method returns
/// the row it occupies, so a caller can rewrite right-hand sides between solves without rebuilding
/// (the rows keep their place: orthant rows in the order added, then the cones in the order added).
/// </summary>
public sealed class ConeProgramBuilder
{
    private readonly List<string?> _names = [];
    private readonly List<int> _lowerRow = [];
    private readonly List<int> _upperRow = [];
    private readonly List<double> _q = [];
    private readonly Dictionary<(int, int), double> _p = [];
    private readonly List<(int Row, int Col, double Value)> _a = [];
    private readonly List<double> _b = [];
    private readonly List<(int Row, int Col, double Value)> _gLin = [];
    private readonly List<double> _hLin = [];
    private readonly List<(int Row, int Col, double Value)> _gSoc = [];
    private readonly List<double> _hSoc = [];
    private readonly List<int> _socSizes = [];
    private double _constant;

    /// <summary>Number of variables added so far.</summary>
    public int VariableCount => _q.Count;

    /// <summary>Number of orthant (linear inequality) rows added so far.</summary>
    public int InequalityCount => _hLin.Count;

    /// <summary>Number of equality rows added so far.</summary>
    public int EqualityCount => _b.Count;

    /// <summary>Name given to a variable, if any.</summary>
    public string? NameOf(Variable v) => _names[v.Index];

    /// <summary>
    /// Adds a variable with optional bounds (infinite means none). Each finite bound becomes one
    /// orthant row; see <see cref="LowerBoundRow"/> and <see cref="UpperBoundRow"/>.
    /// </summary>
    public Variable AddVariable(string? name = null, double lower = double.NegativeInfinity, double upper = double.PositiveInfinity)
    {
        if (double.IsNaN(lower) || double.IsNaN(upper) || lower > upper)
            throw new ArgumentException($"variable '{name ?? _q.Count.ToString()}' has bounds [{lower}, {upper}]");
        var v = new Variable(_q.Count);
        _names.Add(name);
        _q.Add(0);
        _lowerRow.Add(double.IsFinite(lower) ? AddGreaterOrEqual(LinearExpression.Of(v), lower) : -1);
        _upperRow.Add(double.IsFinite(upper) ? AddLessOrEqual(LinearExpression.Of(v), upper) : -1);
        return v;
    }

    /// <summary>Orthant row of the lower bound of <paramref name="v"/> (h holds −lower there), or −1.</summary>
    public int LowerBoundRow(Variable v) => _lowerRow[v.Index];

    /// <summary>Orthant row of the upper bound of <paramref name="v"/> (h holds upper there), or −1.</summary>
    public int UpperBoundRow(Variable v) => _upperRow[v.Index];

    /// <summary>Adds <c>lhs = rhs</c>; returns its row in A and b (b holds rhs − lhs.Constant).</summary>
    public int AddEquality(LinearExpression lhs, double rhs)
    {
        int row = _b.Count;
        foreach (var (i, c) in lhs.Terms) _a.Add((row, Check(i), c));
        _b.Add(Finite(rhs - lhs.Constant, "equality right-hand side"));
        return row;
    }

    /// <summary>Adds <c>lhs ≤ rhs</c>; returns its orthant row in G and h (h holds rhs − lhs.Constant).</summary>
    public int AddLessOrEqual(LinearExpression lhs, double rhs)
    {
        int row = _hLin.Count;
        foreach (var (i, c) in lhs.Terms) _gLin.Add((row, Check(i), c));
        _hLin.Add(Finite(rhs - lhs.Constant, "inequality right-hand side"));
        return row;
    }

    /// <summary>Adds <c>lhs ≥ rhs</c>; returns its orthant row (stored as −lhs ≤ −rhs, so h holds lhs.Constant − rhs).</summary>
    public int AddGreaterOrEqual(LinearExpression lhs, double rhs)
    {
        int row = _hLin.Count;
        foreach (var (i, c) in lhs.Terms) _gLin.Add((row, Check(i), -c));
        _hLin.Add(Finite(lhs.Constant - rhs, "inequality right-hand side"));
        return row;
    }

    /// <summary>
    /// Adds the second-order cone constraint ‖(u₁, …, u_m)‖₂ ≤ t over affine expressions; returns
    /// the cone's ordinal (its first row is <see cref="ConeProgram.SecondOrderRowStart"/> of it).
    /// Row k of the cone holds s_k = expression_k(x), i.e. G row −coefficients and h the constant.
    /// </summary>
    public int AddSecondOrderCone(LinearExpression t, params LinearExpression[] u)
    {
        int ordinal = _socSizes.Count;
        int row = _hSoc.Count;
        AddConeRow(row, t);
        for (int k = 0; k < u.Length; k++) AddConeRow(row + 1 + k, u[k]);
        _socSizes.Add(u.Length + 1);
        return ordinal;
    }

    private void AddConeRow(int row, LinearExpression e)
    {
        foreach (var (i, c) in e.Terms) _gSoc.Add((row, Check(i), -c));
        _hSoc.Add(e.Constant);
    }

    /// <summary>Adds c · v to the objective.</summary>
    public void AddObjectiveLinear(Variable v, double c) => _q[Check(v.Index)] += Finite(c, "linear objective coefficient");

    /// <summary>Adds coefficient · x_a · x_b to the objective (coefficient · x_a² when a = b); keep the total convex.</summary>
    public void AddObjectiveProduct(Variable a, Variable b, double coefficient)
    {
        Finite(coefficient, "quadratic objective coefficient");
        int i = Math.Min(Check(a.Index), Check(b.Index)), j = Math.Max(a.Index, b.Index);
        // ½ xᵀPx: a diagonal term c·x² is P_ii = 2c; an off-diagonal c·x_a·x_b is P_ab = P_ba = c.
        double add = i == j ? 2 * coefficient : coefficient;
        _p[(i, j)] = _p.GetValueOrDefault((i, j)) + add;
    }

    /// <summary>Adds weight · (v − target)² to the objective (weight ≥ 0).</summary>
    public void AddObjectiveSquaredDistance(Variable v, double weight, double target)
    {
        if (!(weight >= 0) || !double.IsFinite(weight)) throw new ArgumentException($"weight must be finite and non-negative, got {weight}");
        AddObjectiveProduct(v, v, weight);
        AddObjectiveLinear(v, -2 * weight * Finite(target, "target"));
        _constant += weight * target * target;
    }

    /// <summary>Adds a constant to the objective.</summary>
    public void AddObjectiveConstant(double c) => _constant += Finite(c, "objective constant");

    /// <summary>
    /// Assembles the program. Quadratic terms that were added but are zero are kept as stored
    /// entries (so their values can be changed later without changing the pattern).
    /// </summary>
    public ConeProgram Build()
    {
        int n = _q.Count;
        var (pr, pc, pv) = Split(_p.Select(kv => (kv.Key.Item1, kv.Key.Item2, kv.Value)).ToList());
        var p = SparseMatrix.FromTriplets(n, n, pr, pc, pv);
        var (ar, ac, av) = Split(_a);
        var a = SparseMatrix.FromTriplets(_b.Count, n, ar, ac, av);
        int l = _hLin.Count;
        var g = _gLin.Concat(_gSoc.Select(e => (e.Row + l, e.Col, e.Value))).ToList();
        var (gr, gc, gv) = Split(g);
        var h = _hLin.Concat(_hSoc).ToArray();
        var gm = SparseMatrix.FromTriplets(h.Length, n, gr, gc, gv);
        return new ConeProgram(p, _q.ToArray(), a, _b.ToArray(), gm, h, new ConeDimensions(l, _socSizes), _constant);
    }

    private static (int[], int[], double[]) Split(List<(int Row, int Col, double Value)> t) =>
        (t.Select(e => e.Row).ToArray(), t.Select(e => e.Col).ToArray(), t.Select(e => e.Value).ToArray());

    private int Check(int index) =>
        (uint)index < (uint)_q.Count ? index : throw new ArgumentException($"variable {index} does not belong to this builder");

    private static double Finite(double v, string what) =>
        double.IsFinite(v) ? v : throw new ArgumentException($"{what} is not finite ({v})");
}
