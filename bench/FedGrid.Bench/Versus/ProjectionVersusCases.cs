using System.Diagnostics;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.Optimization;
using FedGrid.Grid.Projection;
using FedGrid.TestSupport;

namespace FedGrid.Bench.Versus;

/// <summary>
/// Safety-projection cone programs, ours (<see cref="InteriorPointSolver"/>, timed in this process)
/// against CVXOPT's coneqp through tests/reference/cone_reference.py (timed inside Python, solver call
/// only) on the same exported programs: the Baran &amp; Wu feeder (33 buses, three seeded proposals)
/// and copies of it joined at the substation (66 and 99 buses), all proposals at the top of their
/// boxes. Both solvers start cold. The 1650-bus case (50 copies) is ours only: CVXOPT needs minutes there.
/// </summary>
internal sealed class ProjectionVersusCase(int copies, ulong[] seeds, bool withReference) : IVersusCase
{
    public static IEnumerable<IVersusCase> All() =>
    [
        new ProjectionVersusCase(1, [1, 2, 3], true),
        new ProjectionVersusCase(2, [2], true),
        new ProjectionVersusCase(3, [2], true),
        new ProjectionVersusCase(50, [1], false),
    ];

    public string Name => $"projection-{33 * copies}";

    public VersusResult Run(int repetitions)
    {
        Feeder feeder = TestFeeders.BaranWu(copies);
        string dir = Directory.CreateTempSubdirectory("fedgrid-versus-projection-").FullName;
        try
        {
            var oursMs = new List<double>();
            var files = new List<string>();
            var objectives = new List<double>();
            int iterations = 0;
            foreach (ulong seed in seeds)
            {
                var set = SyntheticUnitSet.Draw(feeder, seed);
                // Cold start on every solve, like the reference (the projector's default warm start would
                // restart each repetition from its own solution).
                var projector = new SetpointProjector(feeder, set.Units, options: new ProjectionOptions(Solver: new SolverOptions()));
                projector.WriteProgram(set.Input);
                var solver = projector.Solver;
                int reps = copies >= 50 ? Math.Min(repetitions, 20) : repetitions;
                for (int i = 0; i < 3; i++) solver.Solve();
                var times = new double[reps];
                SolverResult r = default;
                for (int i = 0; i < reps; i++)
                {
                    long t0 = Stopwatch.GetTimestamp();
                    r = solver.Solve();
                    times[i] = Stopwatch.GetElapsedTime(t0).TotalMilliseconds;
                }
                if (r.Status != SolverStatus.Optimal) throw new InvalidOperationException($"{Name} seed {seed}: ours ended {r.Status}");
                oursMs.Add(Median(times));
                objectives.Add(r.PrimalObjective);
                iterations = Math.Max(iterations, r.Iterations);
                string file = Path.Combine(dir, $"seed{seed}.json");
                ConeProgramExchange.WriteFile(projector.Program, file);
                files.Add(file);
            }
            double ours = Median([.. oursMs]);
            var extra = new Dictionary<string, double>
            {
                ["buses"] = feeder.Buses.Count,
                ["instances"] = seeds.Length,
                ["oursIterations"] = iterations,
            };
            if (!withReference) return new VersusResult(Name, ours, null, null, extra);

            var refs = CvxoptReference.Solve(files, "qp", repeat: Math.Max(1, Math.Min(repetitions, copies == 1 ? 5 : 2)));
            double maxRel = 0;
            var refMs = new List<double>();
            for (int k = 0; k < refs.Count; k++)
            {
                if (refs[k].Status != "optimal" || refs[k].Objective is not { } ro)
                    throw new InvalidOperationException($"{Name} seed {seeds[k]}: CVXOPT ended {refs[k].Status}");
                maxRel = Math.Max(maxRel, Math.Abs(objectives[k] - ro) / Math.Max(1, Math.Abs(ro)));
                refMs.Add(refs[k].MedianMs);
            }
            return new VersusResult(Name, ours, Median([.. refMs]), maxRel, extra);
        }
        finally
        {
            Directory.Delete(dir, true);
        }
    }

    private static double Median(double[] v)
    {
        Array.Sort(v);
        return v.Length % 2 == 1 ? v[v.Length / 2] : 0.5 * (v[v.Length / 2 - 1] + v[v.Length / 2]);
    }
}
