namespace FedGrid.Grid.Optimization;

/// <summary>
/// Primal-dual interior-point solver for <see cref="ConeProgram"/> (convex QP over the nonnegative
/// orthant × second-order cones), with infeasibility detection by a homogeneous embedding.
/// <para>
/// <b>Embedding.</b> Stack the constraints as M = [A; G], c = [b; h], with s = 0 on the equality
/// rows (the zero cone, whose dual is free). The solver follows the homogeneous self-dual
/// embedding extended to quadratic objectives (the form used by Goulart &amp; Chen's Clarabel, 2024,
/// after Andersen, Roos &amp; Terlaky, "On implementing a primal-dual interior-point method for conic
/// quadratic optimization", Math. Program. 2003, and Ye, Todd &amp; Mizuno 1994 for LP):
/// <code>
///   P x + Mᵀz + q τ = 0,      M x + s − c τ = 0,
///   qᵀx + cᵀz + xᵀPx/τ + κ = 0,      (s, z) ∈ K × K*,  τ, κ ≥ 0.
/// </code>
/// Every feasible point of this system has sᵀz + τκ = 0. If the iterates end with τ &gt; 0,
/// (x, s, z)/τ is optimal; if τ → 0 with κ &gt; 0, then cᵀz &lt; 0 with Mᵀz ≈ 0 (a Farkas
/// certificate: primal infeasible) or qᵀx &lt; 0 with Px ≈ 0, Mx + s ≈ 0 (an improving ray: dual
/// infeasible). Both certificates are checked explicitly at every iteration, so infeasibility is
/// reported as soon as the iterate proves it rather than after an iteration limit.
/// </para>
/// <para>
/// <b>Scaling and step.</b> Nesterov–Todd scaling W with W z = W⁻ᵀ s = λ on every cone (diagonal
/// √(s/z) on the orthant; on a second-order cone, W = η(2vvᵀ − J) as in Vandenberghe, "The CVXOPT
/// linear and quadratic cone program solvers", 2010, with v = (w̄ + e)/√(2(w̄₀+1)) the hyperbolic
/// Householder vector of the normalised scaling point w̄). The Newton system of the embedding is
/// reduced, by eliminating Δs and Δκ, to the quasi-definite KKT matrix [P Mᵀ; M −WᵀW] solved with
/// two right-hand sides: [−q; c] once per iteration and one per direction, after which Δτ is a
/// scalar equation. Directions: Mehrotra predictor–corrector — an affine step (σ = 0), σ =
/// (1 − α_aff)³, then a combined step with the second-order term (W⁻ᵀΔs_a)∘(WΔz_a) on the cones and
/// Δτ_aΔκ_a on τκ; step length StepFraction × the largest step keeping s, z, τ, κ in the cone.
/// </para>
/// <para>
/// <b>Linear algebra.</b> <see cref="KktSystem"/>: one minimum-degree ordering and symbolic LDLᵀ
/// (elimination tree, column counts) at construction; numeric LDLᵀ per iteration with static
/// regularisation ±δ, dynamic pivot regularisation and iterative refinement. Second-order cone blocks
/// of WᵀW are stored dense, which suits the many small cones of a branch flow model (size 4); a cone
/// of size m costs m²/2 entries. No memory is allocated by <see cref="Solve"/>.
/// </para>
/// <para>
/// <b>Scaling of the data.</b> The iteration works on (cP, cq) with c = 1/max(1, max|P|, ‖q‖∞), which
/// leaves x unchanged and scales the multipliers by c (undone on output). When the iteration stops on
/// numerical trouble or the iteration limit, the last iterate is tested once more as an infeasibility
/// certificate at <see cref="SolverOptions.ReducedInfeasibilityTolerance"/>: on infeasible problems τ → 0
/// and the directions lose accuracy before the strict certificate test passes.
/// </para>
/// <para>
/// <b>Initial point.</b> As in CVXOPT's coneqp: solve the KKT system with W = I and right-hand side
/// [−q; c], set s = −z on the cone rows, and shift s and z into the interior by (1 + α)e where α is
/// the most negative eigenvalue, if needed; τ = κ = 1. With <see cref="SolverOptions.WarmStart"/>
/// the previous solution is used instead, each cone component pushed to at least a small margin
/// inside the cone (interior-point methods often gain little from this; measure before relying on it).
/// </para>
/// </summary>
public sealed class InteriorPointSolver
{
    private readonly ConeProgram _pg;
    private readonly SolverOptions _o;
    private readonly KktSystem _kkt;
    private readonly int _n, _p, _mg, _m, _l;
    private readonly int[] _socStart, _socDim, _socUpperStart;
    // Iterate.
    private readonly double[] _x, _s, _z;
    private double _tau, _kappa;
    // Directions.
    private readonly double[] _dx, _ds, _dz, _dxa, _dsa, _dza;
    private readonly double[] _x2, _z2, _x1, _z1;
    // Residuals and products.
    private readonly double[] _r1, _r2, _px, _mx, _mtz, _qp2;
    // Scaling.
    private readonly double[] _lambda, _wOrth, _wbar, _eta, _hDiag, _hUpper;
    // Work.
    private readonly double[] _rhs, _sol, _ws, _wt, _wu, _dS;
    // Solution (scaled by 1/τ or certificate normalisation).
    private readonly double[] _xs, _ss, _ys, _zs;
    private bool _hasSolution;
    // Objective scaling: the iteration works on (cP, cq); duals are unscaled on output.
    private readonly double[] _qs;
    private double _c = 1;

    /// <summary>Analyses the program's structure (ordering, symbolic factorisation) and allocates every buffer.</summary>
    public InteriorPointSolver(ConeProgram program, SolverOptions? options = null)
    {
        _pg = program;
        _o = options ?? SolverOptions.Default;
        _n = program.VariableCount;
        _p = program.EqualityCount;
        _mg = program.Cones.Dimension;
        _m = _p + _mg;
        _l = program.Cones.Nonnegative;
        int nc = program.Cones.SecondOrderCount;
        _socStart = new int[nc];
        _socDim = new int[nc];
        _socUpperStart = new int[nc + 1];
        for (int k = 0; k < nc; k++)
        {
            _socStart[k] = program.SecondOrderRowStart(k);
            _socDim[k] = program.Cones.SecondOrder[k];
            _socUpperStart[k + 1] = _socUpperStart[k] + _socDim[k] * (_socDim[k] - 1) / 2;
        }
        _kkt = new KktSystem(program);
        int n = _n, m = _m, mg = _mg;
        _x = new double[n]; _s = new double[m]; _z = new double[m];
        _dx = new double[n]; _ds = new double[m]; _dz = new double[m];
        _dxa = new double[n]; _dsa = new double[m]; _dza = new double[m];
        _x2 = new double[n]; _z2 = new double[m]; _x1 = new double[n]; _z1 = new double[m];
        _r1 = new double[n]; _r2 = new double[m]; _px = new double[n]; _mx = new double[m]; _mtz = new double[n]; _qp2 = new double[n];
        _lambda = new double[mg]; _wOrth = new double[_l]; _wbar = new double[mg - _l]; _eta = new double[nc];
        _hDiag = new double[m]; _hUpper = new double[_socUpperStart[nc]];
        _rhs = new double[n + m]; _sol = new double[n + m];
        _ws = new double[mg]; _wt = new double[mg]; _wu = new double[mg]; _dS = new double[mg];
        _xs = new double[n]; _ss = new double[mg]; _ys = new double[_p]; _zs = new double[mg];
        _qs = new double[n];
    }

    /// <summary>The program this solver was built for (its values are re-read at every solve).</summary>
    public ConeProgram Program => _pg;

    /// <summary>The settings.</summary>
    public SolverOptions Options => _o;

    /// <summary>Size of the KKT matrix (variables + equality rows + cone rows).</summary>
    public int KktSize => _kkt.Size;

    /// <summary>Stored entries of the KKT matrix's upper triangle.</summary>
    public int KktNonZeros => _kkt.MatrixNonZeros;

    /// <summary>Entries of the LDLᵀ factor L below the diagonal (compare with <see cref="KktNonZeros"/> minus the diagonal for the fill).</summary>
    public int FactorNonZeros => _kkt.FactorNonZeros;

    /// <summary>Primal solution x (or the dual-infeasibility certificate).</summary>
    public ReadOnlySpan<double> X => _xs;

    /// <summary>Cone slack s = h − Gx.</summary>
    public ReadOnlySpan<double> S => _ss;

    /// <summary>Multipliers y of the equalities Ax = b (or the certificate's y).</summary>
    public ReadOnlySpan<double> Y => _ys;

    /// <summary>Multipliers z ∈ K of the cone constraints (or the certificate's z).</summary>
    public ReadOnlySpan<double> Z => _zs;

    /// <summary>Writes the warm-start state (whether a solution is held, and x, s, y, z of the last solve) for a checkpoint.</summary>
    /// <param name="writer">Where to write.</param>
    public void WriteWarmStart(BinaryWriter writer)
    {
        ArgumentNullException.ThrowIfNull(writer);
        writer.Write(_hasSolution);
        foreach (double[] a in new[] { _xs, _ss, _ys, _zs })
        {
            writer.Write(a.Length);
            foreach (double v in a) writer.Write(v);
        }
    }

    /// <summary>Restores the state of <see cref="WriteWarmStart"/> (same program shape), so the next solve starts where the checkpointed solver would have.</summary>
    /// <param name="reader">Where to read.</param>
    /// <exception cref="InvalidDataException">The state is for another program shape.</exception>
    public void ReadWarmStart(BinaryReader reader)
    {
        ArgumentNullException.ThrowIfNull(reader);
        bool has = reader.ReadBoolean();
        foreach (double[] a in new[] { _xs, _ss, _ys, _zs })
        {
            int n = reader.ReadInt32();
            if (n != a.Length) throw new InvalidDataException($"warm-start vector of {n} values; the program needs {a.Length}");
            for (int i = 0; i < n; i++) a[i] = reader.ReadDouble();
        }
        _hasSolution = has;
    }

    /// <summary>Solves the program with its current values. Allocation-free.</summary>
    public SolverResult Solve()
    {
        int n = _n, p = _p, m = _m;
        double[] x = _x, s = _s, z = _z;
        double[] b = _pg.BArray, h = _pg.HArray;
        double pmax = 0;
        foreach (double v in _pg.P.ValueArray) pmax = Math.Max(pmax, Math.Abs(v));
        _c = 1 / Math.Max(1, Math.Max(pmax, InfNorm(_pg.QArray)));
        for (int j = 0; j < n; j++) _qs[j] = _c * _pg.QArray[j];
        double[] q = _qs;
        int nu = _pg.Cones.Degree;
        double delta = _o.StaticRegularization;
        double qNorm = InfNorm(q), cNorm = Math.Max(InfNorm(b), InfNorm(h));

        if (!(_o.WarmStart && _hasSolution) && !InitialPoint())
            return Finish(SolverStatus.NumericalTrouble, 0);
        if (_o.WarmStart && _hasSolution) WarmPoint();

        int stalls = 0;
        SolverStatus status = SolverStatus.IterationLimit;
        int iter;
        for (iter = 0; ; iter++)
        {
            // Residuals of the embedding.
            Residuals(out double r3, out double xPx);
            if (!double.IsFinite(r3) || !double.IsFinite(_tau) || !double.IsFinite(_kappa))
            {
                status = SolverStatus.NumericalTrouble;
                break;
            }
            double tau = _tau, kappa = _kappa;
            double pres = InfNorm(_r2) / tau, dres = InfNorm(_r1) / tau;
            double qx = Dot(q, x), cz = Dot(b, z.AsSpan(0, p)) + Dot(h, z.AsSpan(p));
            double c0 = _c * _pg.ObjectiveConstant;
            double pobj = (0.5 * xPx / tau + qx) / tau + c0;
            double dobj = (-0.5 * xPx / tau - cz) / tau + c0;
            double mxNorm = InfNorm(_mx) / tau, sNorm = InfNorm(s) / tau, pxNorm = InfNorm(_px) / tau, mtzNorm = InfNorm(_mtz) / tau;
            bool primalOk = pres <= _o.FeasibilityTolerance * (1 + Math.Max(cNorm, Math.Max(mxNorm, sNorm)));
            bool dualOk = dres <= _o.FeasibilityTolerance * (1 + Math.Max(qNorm, Math.Max(pxNorm, mtzNorm)));
            double gapAbs = Math.Abs(pobj - dobj);
            bool gapOk = gapAbs <= _o.AbsoluteGapTolerance + _o.RelativeGapTolerance * Math.Min(Math.Abs(pobj), Math.Abs(dobj));
            if (primalOk && dualOk && gapOk)
            {
                status = SolverStatus.Optimal;
                break;
            }
            // Certificates (unnormalised iterate).
            if (cz < 0 && InfNorm(_mtz) <= _o.InfeasibilityTolerance * -cz * Math.Max(1, cNorm))
            {
                status = SolverStatus.PrimalInfeasible;
                break;
            }
            if (qx < 0)
            {
                // ‖Mx + s‖ and ‖Px‖ per unit of −qᵀx.
                double ms = 0;
                for (int i = 0; i < m; i++) ms = Math.Max(ms, Math.Abs(_mx[i] + s[i]));
                if (InfNorm(_px) <= _o.InfeasibilityTolerance * -qx * Math.Max(1, qNorm) && ms <= _o.InfeasibilityTolerance * -qx * Math.Max(1, qNorm))
                {
                    status = SolverStatus.DualInfeasible;
                    break;
                }
            }
            if (iter >= _o.MaxIterations) break;

            // Scaling, KKT factorisation, and the fixed right-hand side [−q; c].
            if (!Scaling())
            {
                status = SolverStatus.NumericalTrouble;
                break;
            }
            double mu = (Dot(s.AsSpan(p), z.AsSpan(p)) + tau * kappa) / (nu + 1);
            if (!_kkt.Factor(_c, _hDiag, _hUpper, delta))
            {
                status = SolverStatus.NumericalTrouble;
                break;
            }
            for (int j = 0; j < n; j++) _rhs[j] = -q[j];
            for (int i = 0; i < p; i++) _rhs[n + i] = b[i];
            for (int i = 0; i < _mg; i++) _rhs[n + p + i] = h[i];
            _kkt.Solve(_rhs, _sol, _o.RefinementSteps);
            Array.Copy(_sol, _x2, n);
            Array.Copy(_sol, n, _z2, 0, m);
            // q + 2Pξ with ξ = x/τ.
            for (int j = 0; j < n; j++) _qp2[j] = q[j] + 2 * _px[j] / tau;
            double xiPxi = xPx / (tau * tau);

            // Predictor: d_s = −λ∘λ, d_κ = −τκ, full residual (unrefined: it only sets σ and the corrector term).
            ConeProduct(_lambda, _lambda, _dS);
            for (int i = 0; i < _mg; i++) _dS[i] = -_dS[i];
            if (!Direction(1.0, r3, -tau * kappa, xiPxi, _dxa, _dsa, _dza, out double dtauA, out double dkapA, refinementSteps: 0))
            {
                status = SolverStatus.NumericalTrouble;
                break;
            }
            double alphaA = StepLength(_dsa, _dza, dtauA, dkapA);
            double sigma = Math.Pow(1 - Math.Min(1, alphaA), 3);

            // Corrector: d_s = −λ∘λ − (W⁻ᵀΔs_a)∘(WΔz_a) + σμe.
            ApplyWInverse(_dsa.AsSpan(p), _ws);
            ApplyW(_dza.AsSpan(p), _wt);
            ConeProduct(_ws, _wt, _wu);
            ConeProduct(_lambda, _lambda, _dS);
            for (int i = 0; i < _mg; i++) _dS[i] = -_dS[i] - _wu[i];
            AddIdentity(_dS, sigma * mu);
            double dkap = -tau * kappa - dtauA * dkapA + sigma * mu;
            if (!Direction(1 - sigma, r3, dkap, xiPxi, _dx, _ds, _dz, out double dtau, out double dkappa, _o.RefinementSteps))
            {
                status = SolverStatus.NumericalTrouble;
                break;
            }
            double alpha = Math.Min(1, _o.StepFraction * StepLength(_ds, _dz, dtau, dkappa));
            if (!(alpha > 1e-10))
            {
                if (++stalls >= 3)
                {
                    status = SolverStatus.NumericalTrouble;
                    break;
                }
            }
            else stalls = 0;
            for (int j = 0; j < n; j++) x[j] += alpha * _dx[j];
            for (int i = 0; i < m; i++) { s[i] += alpha * _ds[i]; z[i] += alpha * _dz[i]; }
            _tau += alpha * dtau;
            _kappa += alpha * dkappa;
        }
        if (status is SolverStatus.NumericalTrouble or SolverStatus.IterationLimit)
            status = ReducedAccuracyCertificate(status);
        return Finish(status, iter);
    }

    /// <summary>
    /// When the iteration breaks down (typically as τ → 0 on an infeasible problem), accepts the last
    /// iterate as an infeasibility certificate at the looser <see cref="SolverOptions.ReducedInfeasibilityTolerance"/>.
    /// Residuals are recomputed from the data first.
    /// </summary>
    private SolverStatus ReducedAccuracyCertificate(SolverStatus status)
    {
        Residuals(out _, out _);
        double[] q = _qs, b = _pg.BArray, h = _pg.HArray;
        int p = _p;
        double tol = _o.ReducedInfeasibilityTolerance;
        double qNorm = InfNorm(q), cNorm = Math.Max(InfNorm(b), InfNorm(h));
        double qx = Dot(q, _x), cz = Dot(b, _z.AsSpan(0, p)) + Dot(h, _z.AsSpan(p));
        if (!double.IsFinite(qx) || !double.IsFinite(cz)) return status;
        if (cz < 0 && InfNorm(_mtz) <= tol * -cz * Math.Max(1, cNorm)) return SolverStatus.PrimalInfeasible;
        if (qx < 0)
        {
            double ms = 0;
            for (int i = 0; i < _m; i++) ms = Math.Max(ms, Math.Abs(_mx[i] + _s[i]));
            double bound = tol * -qx * Math.Max(1, qNorm);
            if (InfNorm(_px) <= bound && ms <= bound) return SolverStatus.DualInfeasible;
        }
        return status;
    }

    private SolverResult Finish(SolverStatus status, int iter)
    {
        int n = _n, p = _p;
        double[] q = _pg.QArray, b = _pg.BArray, h = _pg.HArray;
        double scaleX, scaleZ;
        double qx = Dot(q, _x), cz = Dot(b, _z.AsSpan(0, p)) + Dot(h, _z.AsSpan(p));
        switch (status)
        {
            case SolverStatus.PrimalInfeasible:
                scaleX = 0;
                scaleZ = 1 / -cz;
                break;
            case SolverStatus.DualInfeasible:
                scaleX = 1 / -qx;
                scaleZ = 0;
                break;
            default:
                scaleX = _tau > 0 ? 1 / _tau : 0;
                scaleZ = scaleX / _c;
                break;
        }
        for (int j = 0; j < n; j++) _xs[j] = _x[j] * scaleX;
        for (int i = 0; i < p; i++) _ys[i] = _z[i] * scaleZ;
        for (int i = 0; i < _mg; i++)
        {
            _zs[i] = _z[p + i] * scaleZ;
            _ss[i] = _s[p + i] * (status == SolverStatus.PrimalInfeasible ? scaleZ : scaleX);
        }
        _hasSolution = status == SolverStatus.Optimal;

        // Report residuals at the returned (scaled) point.
        Array.Clear(_px);
        _pg.P.SymmetricUpperMultiplyAdd(1, _xs, _px);
        double xPx = Dot(_px, _xs);
        double pobj = 0.5 * xPx + Dot(q, _xs) + _pg.ObjectiveConstant;
        double dobj = -0.5 * xPx - Dot(b, _ys) - Dot(h, _zs) + _pg.ObjectiveConstant;
        double pres = 0, dres = 0;
        Array.Clear(_mx);
        _pg.A.MultiplyAdd(1, _xs, _mx.AsSpan(0, p));
        _pg.G.MultiplyAdd(1, _xs, _mx.AsSpan(p));
        for (int i = 0; i < p; i++) pres = Math.Max(pres, Math.Abs(_mx[i] - b[i]));
        for (int i = 0; i < _mg; i++) pres = Math.Max(pres, Math.Abs(_mx[p + i] + _ss[i] - h[i]));
        Array.Copy(_px, _mtz, n);
        for (int j = 0; j < n; j++) _mtz[j] += q[j];
        _pg.A.TransposeMultiplyAdd(1, _ys, _mtz);
        _pg.G.TransposeMultiplyAdd(1, _zs, _mtz);
        dres = InfNorm(_mtz);
        double gap = Dot(_ss, _zs);
        return new SolverResult(status, iter, pobj, dobj, pres, dres, gap, _tau, _kappa);
    }

    /// <summary>r1 = Px + Mᵀz + qτ, r2 = Mx + s − cτ, r3 = qᵀx + cᵀz + xᵀPx/τ + κ; also Px, Mx, Mᵀz.</summary>
    private void Residuals(out double r3, out double xPx)
    {
        int n = _n, p = _p;
        double tau = _tau;
        double[] q = _qs, b = _pg.BArray, h = _pg.HArray;
        Array.Clear(_px);
        _pg.P.SymmetricUpperMultiplyAdd(_c, _x, _px);
        xPx = Dot(_px, _x);
        Array.Clear(_mtz);
        _pg.A.TransposeMultiplyAdd(1, _z.AsSpan(0, p), _mtz);
        _pg.G.TransposeMultiplyAdd(1, _z.AsSpan(p), _mtz);
        for (int j = 0; j < n; j++) _r1[j] = _px[j] + _mtz[j] + q[j] * tau;
        Array.Clear(_mx);
        _pg.A.MultiplyAdd(1, _x, _mx.AsSpan(0, p));
        _pg.G.MultiplyAdd(1, _x, _mx.AsSpan(p));
        for (int i = 0; i < p; i++) _r2[i] = _mx[i] + _s[i] - b[i] * tau;
        for (int i = 0; i < _mg; i++) _r2[p + i] = _mx[p + i] + _s[p + i] - h[i] * tau;
        r3 = Dot(q, _x) + Dot(b, _z.AsSpan(0, p)) + Dot(h, _z.AsSpan(p)) + xPx / tau + _kappa;
    }

    /// <summary>
    /// Solves the linearised embedding for residual weight η and complementarity targets d_s (in
    /// <see cref="_dS"/>) and d_κ; writes Δx, Δs, Δz, Δτ, Δκ.
    /// </summary>
    private bool Direction(double etaW, double r3, double dkap, double xiPxi, double[] dx, double[] ds, double[] dz, out double dtau, out double dkappa, int refinementSteps)
    {
        int n = _n, p = _p, mg = _mg;
        double tau = _tau, kappa = _kappa;
        double[] b = _pg.BArray, h = _pg.HArray;
        // u = W (λ \ d_s)
        ConeDivide(_lambda, _dS, _ws);
        ApplyW(_ws, _wu);
        for (int j = 0; j < n; j++) _rhs[j] = -etaW * _r1[j];
        for (int i = 0; i < p; i++) _rhs[n + i] = -etaW * _r2[i];
        for (int i = 0; i < mg; i++) _rhs[n + p + i] = -etaW * _r2[p + i] - _wu[i];
        _kkt.Solve(_rhs, _sol, refinementSteps);
        Array.Copy(_sol, _x1, n);
        Array.Copy(_sol, n, _z1, 0, _m);
        double num = -etaW * r3 - dkap / tau - Dot(_qp2, _x1) - Dot(b, _z1.AsSpan(0, p)) - Dot(h, _z1.AsSpan(p));
        double den = Dot(_qp2, _x2) + Dot(b, _z2.AsSpan(0, p)) + Dot(h, _z2.AsSpan(p)) - xiPxi - kappa / tau;
        dtau = num / den;
        dkappa = 0;
        if (!double.IsFinite(dtau)) return false;
        for (int j = 0; j < n; j++) dx[j] = _x1[j] + dtau * _x2[j];
        for (int i = 0; i < _m; i++) dz[i] = _z1[i] + dtau * _z2[i];
        // Δs = W(λ \ d_s) − WᵀW Δz on the cone rows; 0 on equality rows.
        for (int i = 0; i < p; i++) ds[i] = 0;
        ApplyW(dz.AsSpan(p), _wt);
        ApplyW(_wt, _ws);
        for (int i = 0; i < mg; i++) ds[p + i] = _wu[i] - _ws[i];
        dkappa = (dkap - kappa * dtau) / tau;
        return double.IsFinite(dkappa);
    }

    /// <summary>Largest α ≤ 1/StepFraction·… such that s + αΔs, z + αΔz stay in K and τ, κ stay ≥ 0 (returns up to 1e300).</summary>
    private double StepLength(double[] ds, double[] dz, double dtau, double dkappa)
    {
        double a = 1e300;
        if (dtau < 0) a = Math.Min(a, -_tau / dtau);
        if (dkappa < 0) a = Math.Min(a, -_kappa / dkappa);
        a = Math.Min(a, ConeStep(_s.AsSpan(_p), ds.AsSpan(_p)));
        a = Math.Min(a, ConeStep(_z.AsSpan(_p), dz.AsSpan(_p)));
        return a;
    }

    private double ConeStep(ReadOnlySpan<double> u, ReadOnlySpan<double> d)
    {
        double a = 1e300;
        for (int i = 0; i < _l; i++)
            if (d[i] < 0) a = Math.Min(a, -u[i] / d[i]);
        for (int k = 0; k < _socDim.Length; k++)
            a = Math.Min(a, SocStep(u.Slice(_socStart[k], _socDim[k]), d.Slice(_socStart[k], _socDim[k])));
        return a;
    }

    /// <summary>Largest α with u + αd in the second-order cone (u interior), from the roots of (u₀+αd₀)² − ‖u₁+αd₁‖².</summary>
    internal static double SocStep(ReadOnlySpan<double> u, ReadOnlySpan<double> d)
    {
        double qa = d[0] * d[0], qb = u[0] * d[0], qc = u[0] * u[0];
        for (int i = 1; i < u.Length; i++)
        {
            qa -= d[i] * d[i];
            qb -= u[i] * d[i];
            qc -= u[i] * u[i];
        }
        if (qa >= 0 && d[0] >= 0) return 1e300;
        if (qc <= 0) return 0;
        double disc = qb * qb - qa * qc;
        double den = -qb + Math.Sqrt(Math.Max(disc, 0));
        return den > 0 ? qc / den : 1e300;
    }

    /// <summary>NT scaling at the current s, z; fills λ and the KKT blocks H = WᵀW.</summary>
    private bool Scaling()
    {
        int p = _p;
        ReadOnlySpan<double> s = _s.AsSpan(p), z = _z.AsSpan(p);
        for (int i = 0; i < p; i++) _hDiag[i] = 0;
        for (int i = 0; i < _l; i++)
        {
            if (!(s[i] > 0 && z[i] > 0)) return false;
            _wOrth[i] = Math.Sqrt(s[i] / z[i]);
            _lambda[i] = Math.Sqrt(s[i] * z[i]);
            _hDiag[p + i] = s[i] / z[i];
        }
        for (int k = 0; k < _socDim.Length; k++)
        {
            int st = _socStart[k], dim = _socDim[k];
            var sk = s.Slice(st, dim);
            var zk = z.Slice(st, dim);
            double sn = SocResidual(sk), zn = SocResidual(zk);
            if (!(sn > 0 && zn > 0)) return false;
            sn = Math.Sqrt(sn);
            zn = Math.Sqrt(zn);
            double dotBar = 0;
            for (int i = 0; i < dim; i++) dotBar += sk[i] / sn * (zk[i] / zn);
            double gamma = Math.Sqrt((1 + dotBar) / 2);
            var w = _wbar.AsSpan(st - _l, dim);
            w[0] = (sk[0] / sn + zk[0] / zn) / (2 * gamma);
            for (int i = 1; i < dim; i++) w[i] = (sk[i] / sn - zk[i] / zn) / (2 * gamma);
            // w̄ is the normalised NT scaling point (w̄ᵀJw̄ = 1); W = η(2vvᵀ − J) with the
            // hyperbolic Householder vector v = (w̄ + e)/√(2(w̄₀ + 1)), so that W z = W⁻¹ s.
            double vs = 1 / Math.Sqrt(2 * (w[0] + 1));
            w[0] = (w[0] + 1) * vs;
            for (int i = 1; i < dim; i++) w[i] *= vs;
            double eta = Math.Sqrt(sn / zn);
            _eta[k] = eta;
            // λ = W z
            SocApplyW(w, eta, zk, _lambda.AsSpan(st, dim));
            // H = η² (w_a w_b (4 wᵀw − 2J_aa − 2J_bb) + δ_ab)
            double ww = 0;
            for (int i = 0; i < dim; i++) ww += w[i] * w[i];
            double e2 = eta * eta;
            int up = _socUpperStart[k];
            for (int a = 0; a < dim; a++)
            {
                double ja = a == 0 ? 1 : -1;
                _hDiag[p + st + a] = e2 * (w[a] * w[a] * (4 * ww - 4 * ja) + 1);
                for (int bb = a + 1; bb < dim; bb++)
                {
                    double jb = bb == 0 ? 1 : -1;
                    _hUpper[up++] = e2 * w[a] * w[bb] * (4 * ww - 2 * ja - 2 * jb);
                }
            }
        }
        return true;
    }

    private static double SocResidual(ReadOnlySpan<double> u)
    {
        double n2 = 0;
        for (int i = 1; i < u.Length; i++) n2 += u[i] * u[i];
        double nrm = Math.Sqrt(n2);
        return u[0] > nrm ? (u[0] - nrm) * (u[0] + nrm) : -1;
    }

    private static void SocApplyW(ReadOnlySpan<double> w, double eta, ReadOnlySpan<double> v, Span<double> y)
    {
        double wv = 0;
        for (int i = 0; i < w.Length; i++) wv += w[i] * v[i];
        y[0] = eta * (2 * w[0] * wv - v[0]);
        for (int i = 1; i < w.Length; i++) y[i] = eta * (2 * w[i] * wv + v[i]);
    }

    private static void SocApplyWInverse(ReadOnlySpan<double> w, double eta, ReadOnlySpan<double> v, Span<double> y)
    {
        // W⁻¹ = (2 J w wᵀ J − J)/η
        double wJv = w[0] * v[0];
        for (int i = 1; i < w.Length; i++) wJv -= w[i] * v[i];
        y[0] = (2 * w[0] * wJv - v[0]) / eta;
        for (int i = 1; i < w.Length; i++) y[i] = (-2 * w[i] * wJv + v[i]) / eta;
    }

    private void ApplyW(ReadOnlySpan<double> v, Span<double> y)
    {
        for (int i = 0; i < _l; i++) y[i] = _wOrth[i] * v[i];
        for (int k = 0; k < _socDim.Length; k++)
        {
            int st = _socStart[k], dim = _socDim[k];
            SocApplyW(_wbar.AsSpan(st - _l, dim), _eta[k], v.Slice(st, dim), y.Slice(st, dim));
        }
    }

    private void ApplyWInverse(ReadOnlySpan<double> v, Span<double> y)
    {
        for (int i = 0; i < _l; i++) y[i] = v[i] / _wOrth[i];
        for (int k = 0; k < _socDim.Length; k++)
        {
            int st = _socStart[k], dim = _socDim[k];
            SocApplyWInverse(_wbar.AsSpan(st - _l, dim), _eta[k], v.Slice(st, dim), y.Slice(st, dim));
        }
    }

    /// <summary>Jordan product u∘v: elementwise on the orthant, (uᵀv, u₀v₁ + v₀u₁) on each second-order cone.</summary>
    private void ConeProduct(ReadOnlySpan<double> u, ReadOnlySpan<double> v, Span<double> y)
    {
        for (int i = 0; i < _l; i++) y[i] = u[i] * v[i];
        for (int k = 0; k < _socDim.Length; k++)
        {
            int st = _socStart[k], dim = _socDim[k];
            double dot = 0;
            for (int i = 0; i < dim; i++) dot += u[st + i] * v[st + i];
            double u0 = u[st], v0 = v[st];
            for (int i = 1; i < dim; i++) y[st + i] = u0 * v[st + i] + v0 * u[st + i];
            y[st] = dot;
        }
    }

    /// <summary>Inverse Jordan product: y with λ∘y = u.</summary>
    private void ConeDivide(ReadOnlySpan<double> lam, ReadOnlySpan<double> u, Span<double> y)
    {
        for (int i = 0; i < _l; i++) y[i] = u[i] / lam[i];
        for (int k = 0; k < _socDim.Length; k++)
        {
            int st = _socStart[k], dim = _socDim[k];
            double l0 = lam[st], det = l0 * l0, l1u1 = 0;
            for (int i = 1; i < dim; i++)
            {
                det -= lam[st + i] * lam[st + i];
                l1u1 += lam[st + i] * u[st + i];
            }
            double y0 = (l0 * u[st] - l1u1) / det;
            for (int i = 1; i < dim; i++) y[st + i] = (u[st + i] - y0 * lam[st + i]) / l0;
            y[st] = y0;
        }
    }

    private void AddIdentity(Span<double> v, double t)
    {
        for (int i = 0; i < _l; i++) v[i] += t;
        for (int k = 0; k < _socDim.Length; k++) v[_socStart[k]] += t;
    }

    /// <summary>Smallest eigenvalue-like margin of u in K: min over orthant entries and u₀ − ‖u₁‖ per cone.</summary>
    private double ConeMargin(ReadOnlySpan<double> u)
    {
        double m = double.PositiveInfinity;
        for (int i = 0; i < _l; i++) m = Math.Min(m, u[i]);
        for (int k = 0; k < _socDim.Length; k++)
        {
            int st = _socStart[k], dim = _socDim[k];
            double nrm = 0;
            for (int i = 1; i < dim; i++) nrm += u[st + i] * u[st + i];
            m = Math.Min(m, u[st] - Math.Sqrt(nrm));
        }
        return m;
    }

    private bool InitialPoint()
    {
        int n = _n, p = _p, mg = _mg;
        double[] q = _qs, b = _pg.BArray, h = _pg.HArray;
        Array.Clear(_hUpper);
        for (int i = 0; i < p; i++) _hDiag[i] = 0;
        for (int i = 0; i < mg; i++) _hDiag[p + i] = 1;
        if (!_kkt.Factor(_c, _hDiag, _hUpper, _o.StaticRegularization)) return false;
        for (int j = 0; j < n; j++) _rhs[j] = -q[j];
        for (int i = 0; i < p; i++) _rhs[n + i] = b[i];
        for (int i = 0; i < mg; i++) _rhs[n + p + i] = h[i];
        _kkt.Solve(_rhs, _sol, _o.RefinementSteps);
        for (int j = 0; j < n; j++) _x[j] = _sol[j];
        for (int i = 0; i < p; i++) { _z[i] = _sol[n + i]; _s[i] = 0; }
        for (int i = 0; i < mg; i++)
        {
            _z[p + i] = _sol[n + p + i];
            _s[p + i] = -_sol[n + p + i];
        }
        Shift(_s.AsSpan(p), 0);
        Shift(_z.AsSpan(p), 0);
        _tau = 1;
        _kappa = 1;
        for (int i = 0; i < _x.Length; i++) if (!double.IsFinite(_x[i])) return false;
        return true;
    }

    /// <summary>If u is not at least <paramref name="margin"/> inside K, adds (1 + α)e (α the most negative margin) — CVXOPT's rule.</summary>
    private void Shift(Span<double> u, double margin)
    {
        double alpha = -ConeMargin(u);
        if (_mg == 0) return;
        if (alpha >= -margin)
            AddIdentity(u, 1 + alpha);
    }

    private void WarmPoint()
    {
        int n = _n, p = _p, mg = _mg;
        for (int j = 0; j < n; j++) _x[j] = _xs[j];
        for (int i = 0; i < p; i++) { _z[i] = _ys[i] * _c; _s[i] = 0; }
        // Push each cone component a margin inside the cone.
        const double margin = 1e-2;
        for (int i = 0; i < mg; i++) { _s[p + i] = _ss[i]; _z[p + i] = _zs[i] * _c; }
        var s = _s.AsSpan(p);
        var z = _z.AsSpan(p);
        for (int i = 0; i < _l; i++)
        {
            s[i] = Math.Max(s[i], margin);
            z[i] = Math.Max(z[i], margin);
        }
        for (int k = 0; k < _socDim.Length; k++)
        {
            int st = _socStart[k], dim = _socDim[k];
            PushInside(s.Slice(st, dim), margin);
            PushInside(z.Slice(st, dim), margin);
        }
        _tau = 1;
        _kappa = 1;
    }

    private static void PushInside(Span<double> v, double margin)
    {
        double nrm = 0;
        for (int i = 1; i < v.Length; i++) nrm += v[i] * v[i];
        nrm = Math.Sqrt(nrm);
        if (v[0] < nrm + margin) v[0] = nrm + margin;
    }

    private static double Dot(ReadOnlySpan<double> a, ReadOnlySpan<double> b)
    {
        double s = 0;
        for (int i = 0; i < a.Length; i++) s += a[i] * b[i];
        return s;
    }

    private static double InfNorm(ReadOnlySpan<double> a)
    {
        double m = 0;
        for (int i = 0; i < a.Length; i++) m = Math.Max(m, Math.Abs(a[i]));
        return m;
    }
}
