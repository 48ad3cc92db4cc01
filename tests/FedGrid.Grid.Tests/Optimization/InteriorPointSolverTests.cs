using FedGrid.Grid.Optimization;

namespace FedGrid.Grid.Tests.Optimization;

public class InteriorPointSolverTests
{
    private static InteriorPointSolver Solve(ConeProgram program, out SolverResult result, SolverOptions? options = null)
    {
        var solver = new InteriorPointSolver(program, options);
        result = solver.Solve();
        return solver;
    }

    [Theory]
    [InlineData(2.0, 1.0, 1.0)]    // inside the cone: projection is the point itself
    [InlineData(0.5, 3.0, 4.0)]    // outside, partial: ((t+‖u‖)/2)(1, u/‖u‖)
    [InlineData(-6.0, 3.0, 4.0)]   // inside the polar cone: projection is 0
    [InlineData(1.0, -2.0, 0.5)]
    public void Projection_onto_a_second_order_cone_matches_the_closed_form(double t, double u1, double u2)
    {
        // Closed form of the Euclidean projection onto {(t,u): ‖u‖ ≤ t} (Boyd & Vandenberghe,
        // Convex Optimization, 2004, exercise 8.3(c)).
        double[] a = [t, u1, u2];
        var bld = new ConeProgramBuilder();
        var x = new Variable[3];
        for (int i = 0; i < 3; i++) x[i] = bld.AddVariable($"x{i}");
        for (int i = 0; i < 3; i++) bld.AddObjectiveSquaredDistance(x[i], 0.5, a[i]);
        bld.AddSecondOrderCone(LinearExpression.Of(x[0]), LinearExpression.Of(x[1]), LinearExpression.Of(x[2]));
        var solver = Solve(bld.Build(), out var r);

        double nu = Math.Sqrt(u1 * u1 + u2 * u2);
        double[] expected = nu <= t ? a : nu <= -t ? [0, 0, 0] : [(t + nu) / 2, (t + nu) / 2 * u1 / nu, (t + nu) / 2 * u2 / nu];
        Assert.Equal(SolverStatus.Optimal, r.Status);
        for (int i = 0; i < 3; i++) Assert.Equal(expected[i], solver.X[i], 6);
        double dist2 = 0;
        for (int i = 0; i < 3; i++) dist2 += (expected[i] - a[i]) * (expected[i] - a[i]);
        Assert.Equal(0.5 * dist2, r.PrimalObjective, 7);
    }

    [Fact]
    public void Box_constrained_QP_solution_is_the_clipped_target()
    {
        // min Σ dᵢ (xᵢ − cᵢ)² over lo ≤ x ≤ hi is separable; its solution is clip(c, lo, hi) (closed form).
        var rng = new Random(7);
        int n = 40;
        var bld = new ConeProgramBuilder();
        var expected = new double[n];
        double expectedObj = 0;
        for (int i = 0; i < n; i++)
        {
            double lo = rng.NextDouble() * 4 - 2, hi = lo + rng.NextDouble() * 3, c = rng.NextDouble() * 8 - 4, d = 0.1 + rng.NextDouble();
            var v = bld.AddVariable(null, lo, hi);
            bld.AddObjectiveSquaredDistance(v, d, c);
            expected[i] = Math.Clamp(c, lo, hi);
            expectedObj += d * (expected[i] - c) * (expected[i] - c);
        }
        var solver = Solve(bld.Build(), out var r);
        Assert.Equal(SolverStatus.Optimal, r.Status);
        for (int i = 0; i < n; i++) Assert.Equal(expected[i], solver.X[i], 5);
        Assert.Equal(expectedObj, r.PrimalObjective, 6);
        Assert.True(r.Iterations < 30, $"took {r.Iterations} iterations");
    }

    [Fact]
    public void Small_LP_reaches_its_vertex_optimum()
    {
        // max x + y s.t. x + 2y ≤ 4, 3x + y ≤ 6, x, y ≥ 0: the vertex where both constraints
        // bind, x = 8/5, y = 6/5, objective 14/5 (solved by hand).
        var bld = new ConeProgramBuilder();
        var x = bld.AddVariable("x", 0);
        var y = bld.AddVariable("y", 0);
        bld.AddLessOrEqual(LinearExpression.Of(x).Add(y, 2), 4);
        bld.AddLessOrEqual(LinearExpression.Of(x, 3).Add(y), 6);
        bld.AddObjectiveLinear(x, -1);
        bld.AddObjectiveLinear(y, -1);
        var solver = Solve(bld.Build(), out var r);
        Assert.Equal(SolverStatus.Optimal, r.Status);
        Assert.Equal(1.6, solver.X[0], 7);
        Assert.Equal(1.2, solver.X[1], 7);
        Assert.Equal(-2.8, r.PrimalObjective, 7);
        Assert.Equal(-2.8, r.DualObjective, 7);
        // Dual multipliers of the two binding rows (rows 2 and 3 after the bounds): z = (2/5, 1/5) by hand.
        Assert.Equal(0.4, solver.Z[2], 6);
        Assert.Equal(0.2, solver.Z[3], 6);
    }

    [Fact]
    public void LP_with_an_equality_and_a_cone_has_the_known_optimum()
    {
        // min x + 2y + 3w s.t. x + y + w = 1, x, y, w ≥ 0: x = 1, objective 1 (by hand).
        var bld = new ConeProgramBuilder();
        var x = bld.AddVariable("x", 0);
        var y = bld.AddVariable("y", 0);
        var w = bld.AddVariable("w", 0);
        bld.AddEquality(LinearExpression.Of(x).Add(y).Add(w), 1);
        bld.AddObjectiveLinear(x, 1);
        bld.AddObjectiveLinear(y, 2);
        bld.AddObjectiveLinear(w, 3);
        var solver = Solve(bld.Build(), out var r);
        Assert.Equal(SolverStatus.Optimal, r.Status);
        Assert.Equal(1, solver.X[0], 7);
        Assert.Equal(1, r.PrimalObjective, 7);
        Assert.Equal(-1, solver.Y[0], 6); // y = −1 makes q + Aᵀy + Gᵀz = 0 with z = (0, 1, 2) (by hand)

        // min a + b s.t. ‖(a, b)‖ ≤ 1: a = b = −1/√2, objective −√2 (by hand).
        var c = new ConeProgramBuilder();
        var a = c.AddVariable("a");
        var bb = c.AddVariable("b");
        c.AddSecondOrderCone(LinearExpression.OfConstant(1), LinearExpression.Of(a), LinearExpression.Of(bb));
        c.AddObjectiveLinear(a, 1);
        c.AddObjectiveLinear(bb, 1);
        var s2 = Solve(c.Build(), out var r2);
        Assert.Equal(SolverStatus.Optimal, r2.Status);
        Assert.Equal(-Math.Sqrt(2), r2.PrimalObjective, 7);
        Assert.Equal(-1 / Math.Sqrt(2), s2.X[0], 6);
    }

    [Fact]
    public void Infeasible_LP_is_detected_with_a_Farkas_certificate()
    {
        // x ≥ 1, y ≥ 0, x + y ≤ 0.5: no point satisfies all three.
        var bld = new ConeProgramBuilder();
        var x = bld.AddVariable("x", 1);
        var y = bld.AddVariable("y", 0);
        bld.AddLessOrEqual(LinearExpression.Of(x).Add(y), 0.5);
        bld.AddObjectiveLinear(x, 1);
        var program = bld.Build();
        var solver = Solve(program, out var r);
        Assert.Equal(SolverStatus.PrimalInfeasible, r.Status);
        // Certificate: z ≥ 0, Gᵀz ≈ 0, hᵀz = −1.
        var gtz = new double[2];
        program.G.TransposeMultiplyAdd(1, solver.Z, gtz);
        Assert.True(Math.Abs(gtz[0]) < 1e-6 && Math.Abs(gtz[1]) < 1e-6, $"Gᵀz = ({gtz[0]}, {gtz[1]})");
        double hz = 0;
        for (int i = 0; i < program.H.Length; i++) { hz += program.H[i] * solver.Z[i]; Assert.True(solver.Z[i] >= 0); }
        Assert.Equal(-1, hz, 9);
        Assert.True(r.Iterations < 40);
    }

    [Fact]
    public void Unbounded_LP_is_detected_as_dual_infeasible()
    {
        // min −x − y s.t. x − y ≤ 1, x, y ≥ 0: the ray (1, 1) decreases the objective forever.
        var bld = new ConeProgramBuilder();
        var x = bld.AddVariable("x", 0);
        var y = bld.AddVariable("y", 0);
        bld.AddLessOrEqual(LinearExpression.Of(x).Add(y, -1), 1);
        bld.AddObjectiveLinear(x, -1);
        bld.AddObjectiveLinear(y, -1);
        var solver = Solve(bld.Build(), out var r);
        Assert.Equal(SolverStatus.DualInfeasible, r.Status);
        Assert.Equal(-1, -solver.X[0] - solver.X[1], 9);
        Assert.True(solver.X[0] >= -1e-9 && solver.X[1] >= -1e-9 && solver.X[0] - solver.X[1] <= 1e-7);
    }

    [Fact]
    public void Infeasible_cone_program_is_detected()
    {
        // ‖(x, 1)‖ ≤ 0.5 has no solution (the second component alone exceeds the radius).
        var bld = new ConeProgramBuilder();
        var x = bld.AddVariable("x");
        bld.AddSecondOrderCone(LinearExpression.OfConstant(0.5), LinearExpression.Of(x), LinearExpression.OfConstant(1));
        bld.AddObjectiveSquaredDistance(x, 1, 0);
        Solve(bld.Build(), out var r);
        Assert.Equal(SolverStatus.PrimalInfeasible, r.Status);
    }

    [Fact]
    public void Iteration_limit_is_reported()
    {
        var bld = new ConeProgramBuilder();
        var x = bld.AddVariable("x", 0, 1);
        bld.AddObjectiveSquaredDistance(x, 1, 3);
        Solve(bld.Build(), out var r, new SolverOptions(MaxIterations: 1));
        Assert.Equal(SolverStatus.IterationLimit, r.Status);
        Assert.Equal(1, r.Iterations);
    }

    [Fact]
    public void Tree_structured_KKT_factorises_with_almost_no_fill_and_solve_allocates_nothing()
    {
        // A chain x_{k+1} = x_k + u_k with bounds: its KKT graph is a tree plus short cycles.
        var bld = new ConeProgramBuilder();
        int n = 300;
        var x = new Variable[n + 1];
        x[0] = bld.AddVariable("x0", 0, 0);
        for (int k = 0; k < n; k++)
        {
            var u = bld.AddVariable($"u{k}", -1, 1);
            x[k + 1] = bld.AddVariable($"x{k + 1}", -5, 5);
            bld.AddEquality(LinearExpression.Of(x[k + 1]).Add(x[k], -1).Add(u, -1), 0);
            bld.AddObjectiveSquaredDistance(x[k + 1], 1, Math.Sin(k / 10.0) * 8);
            bld.AddObjectiveSquaredDistance(u, 0.1, 0);
        }
        var solver = new InteriorPointSolver(bld.Build());
        int offDiagonal = solver.KktNonZeros - solver.KktSize;
        Assert.True(solver.FactorNonZeros <= offDiagonal * 1.1, $"L has {solver.FactorNonZeros} entries for {offDiagonal} off-diagonal KKT entries");
        var r = solver.Solve();
        Assert.Equal(SolverStatus.Optimal, r.Status);
        long before = GC.GetAllocatedBytesForCurrentThread();
        r = solver.Solve();
        long allocated = GC.GetAllocatedBytesForCurrentThread() - before;
        Assert.Equal(SolverStatus.Optimal, r.Status);
        Assert.Equal(0, allocated);
    }

    [Fact]
    public void Programs_without_cone_rows_or_without_equalities_are_solved()
    {
        // min ½‖x‖² s.t. Σx = 1: x = 1/n (Lagrange, by hand); no cone rows at all.
        var b = new ConeProgramBuilder();
        var vars = Enumerable.Range(0, 5).Select(i => b.AddVariable($"x{i}")).ToArray();
        var sum = new LinearExpression();
        foreach (var v in vars) { sum.Add(v); b.AddObjectiveProduct(v, v, 0.5); }
        b.AddEquality(sum, 1);
        var s1 = Solve(b.Build(), out var r1);
        Assert.Equal(SolverStatus.Optimal, r1.Status);
        for (int i = 0; i < 5; i++) Assert.Equal(0.2, s1.X[i], 8);

        // min ½x² − x with no constraints: x = 1.
        var c = new ConeProgramBuilder();
        var x = c.AddVariable("x");
        c.AddObjectiveProduct(x, x, 0.5);
        c.AddObjectiveLinear(x, -1);
        var s2 = Solve(c.Build(), out var r2);
        Assert.Equal(SolverStatus.Optimal, r2.Status);
        Assert.Equal(1, s2.X[0], 8);
        Assert.Equal(-0.5, r2.PrimalObjective, 8);
    }
}
