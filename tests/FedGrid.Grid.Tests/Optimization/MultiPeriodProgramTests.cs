using FedGrid.Grid.Numerics;
using FedGrid.Grid.Optimization;
using FedGrid.TestSupport;

namespace FedGrid.Grid.Tests.Optimization;

/// <summary>
/// The solver is general: a 96-slot day of deferrable loads coupled by energy carry-over, a shared
/// per-slot capacity and a peak epigraph variable that touches every slot (a dense column), checked
/// against CVXOPT on the same exported program.
/// </summary>
public class MultiPeriodProgramTests
{
    private const int Slots = 96;
    private const double Dt = 0.25; // h

    private static (ConeProgram Program, Variable[,] P) Day(int households, ulong seed, double needScale = 1)
    {
        var rng = new SeededRandom(seed);
        var b = new ConeProgramBuilder();
        var p = new Variable[households, Slots];
        var price = new double[Slots];
        var baseKw = new double[Slots];
        for (int t = 0; t < Slots; t++)
        {
            price[t] = t is >= 64 and < 84 ? 0.40 : 0.15;  // invented time-of-use tariff, per kWh
            baseKw[t] = 20 + 10 * Math.Sin(2 * Math.PI * t / Slots) + rng.NextDouble(0, 2);
        }
        var peak = b.AddVariable("peak", 0);
        b.AddObjectiveLinear(peak, 0.5);
        for (int h = 0; h < households; h++)
        {
            double pmax = rng.NextDouble(3, 11), need = needScale * rng.NextDouble(10, 40), cap = 80;
            var e = b.AddVariable($"e[{h},0]", 0, cap);
            b.AddEquality(LinearExpression.Of(e), rng.NextDouble(0, 5));
            for (int t = 0; t < Slots; t++)
            {
                p[h, t] = b.AddVariable($"p[{h},{t}]", 0, pmax);
                var next = b.AddVariable($"e[{h},{t + 1}]", 0, cap);
                b.AddEquality(LinearExpression.Of(next).Add(e, -1).Add(p[h, t], -Dt * 0.92), 0);   // 92 % charging efficiency
                b.AddObjectiveLinear(p[h, t], price[t] * Dt);
                b.AddObjectiveSquaredDistance(p[h, t], 0.01, pmax / 2);                          // discomfort of deviating from a habit
                e = next;
            }
            b.AddGreaterOrEqual(LinearExpression.Of(e), need);
        }
        for (int t = 0; t < Slots; t++)
        {
            var load = LinearExpression.OfConstant(baseKw[t]);
            for (int h = 0; h < households; h++) load.Add(p[h, t]);
            b.AddLessOrEqual(load, 45);                                   // feeder capacity per slot
            var below = LinearExpression.OfConstant(baseKw[t]);
            for (int h = 0; h < households; h++) below.Add(p[h, t]);
            below.Add(peak, -1);
            b.AddLessOrEqual(below, 0);                                  // peak ≥ load_t
        }
        // One cone to exercise the SOC path: ‖(p[0,0..3])‖ ≤ 12.
        b.AddSecondOrderCone(LinearExpression.OfConstant(12), LinearExpression.Of(p[0, 0]), LinearExpression.Of(p[0, 1]), LinearExpression.Of(p[0, 2]), LinearExpression.Of(p[0, 3]));
        return (b.Build(), p);
    }

    [Fact]
    public void Day_ahead_program_with_energy_carry_over_agrees_with_CVXOPT()
    {
        var (program, p) = Day(6, 11);
        var solver = new InteriorPointSolver(program, new SolverOptions(FeasibilityTolerance: 1e-10, AbsoluteGapTolerance: 1e-10, RelativeGapTolerance: 1e-11));
        var r = solver.Solve();
        Assert.Equal(SolverStatus.Optimal, r.Status);
        var x = solver.X.ToArray();

        string dir = Directory.CreateTempSubdirectory("fedgrid-multiperiod-").FullName;
        try
        {
            string file = Path.Combine(dir, "day.json");
            ConeProgramExchange.WriteFile(program, file);
            var rf = CvxoptReference.Solve([file], "qp")[0];
            Assert.Equal("optimal", rf.Status);
            double rel = Math.Abs(r.PrimalObjective - rf.Objective!.Value) / Math.Max(1, Math.Abs(rf.Objective.Value));
            Assert.True(rel <= 1e-6, $"objective {r.PrimalObjective} vs CVXOPT {rf.Objective} (rel {rel:E2})");
            for (int h = 0; h < p.GetLength(0); h++)
                for (int t = 0; t < Slots; t++)
                    Assert.True(Math.Abs(x[p[h, t].Index] - rf.X![p[h, t].Index]) <= 1e-4, $"p[{h},{t}] {x[p[h, t].Index]} vs {rf.X![p[h, t].Index]}");
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Unreachable_energy_need_is_primal_infeasible_for_both_solvers()
    {
        var (program, _) = Day(3, 5, needScale: 20);   // needs of 200–800 kWh cannot be met at ≤ 11 kW over a day
        var r = new InteriorPointSolver(program).Solve();
        Assert.Equal(SolverStatus.PrimalInfeasible, r.Status);
        string dir = Directory.CreateTempSubdirectory("fedgrid-multiperiod-").FullName;
        try
        {
            string file = Path.Combine(dir, "day.json");
            ConeProgramExchange.WriteFile(program, file);
            Assert.Equal("primal-infeasible", CvxoptReference.Solve([file], "feasibility")[0].Status);
        }
        finally { Directory.Delete(dir, true); }
    }
}
