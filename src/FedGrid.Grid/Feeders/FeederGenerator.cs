using FedGrid.Grid.Numerics;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Grid.Feeders;

/// <summary>Settings of <see cref="FeederGenerator"/>.</summary>
/// <param name="BaseKv">Nominal voltage of every bus, kV line to line.</param>
/// <param name="BaseMva">Power base written into the feeder, MVA.</param>
/// <param name="TotalLoadKw">Sum of the real loads of all buses, kW (kept whatever the bus count: more buses means a finer feeder, not a heavier one).</param>
/// <param name="TargetMinVoltagePu">Base-case minimum bus voltage the impedance scaling aims at, per unit.</param>
/// <param name="VMinPu">Lower voltage limit written on every bus, per unit.</param>
/// <param name="VMaxPu">Upper voltage limit written on every bus, per unit.</param>
public sealed record FeederGeneratorOptions(
    double BaseKv = 12.66,
    double BaseMva = 10,
    double TotalLoadKw = 4000,
    double TargetMinVoltagePu = 0.93,
    double VMinPu = 0.95,
    double VMaxPu = 1.05)
{
    /// <summary>The default settings.</summary>
    public static FeederGeneratorOptions Default { get; } = new();
}

/// <summary>
/// Generates larger radial test feeders by a fixed rule of FedGrid's own, deterministic for a given
/// bus count, seed and options (it draws from <see cref="SeededRandom"/>). The rule, for N buses:
/// <list type="number">
/// <item>Bus "1" is the substation (slack) bus at 1.0 pu. A trunk of max(4, round(2·√N)) buses (the substation included) runs from it as a chain.</item>
/// <item>Laterals are added until there are N buses: each starts at a bus drawn uniformly from every bus but the substation
/// (so laterals also branch off laterals) and is a chain of a length drawn uniformly from 2 to 8 buses (cut to the buses left).</item>
/// <item>Each trunk segment is 0.2–0.6 km of 0.15 + j0.35 Ω/km; each lateral segment 0.05–0.3 km of 0.45 + j0.40 Ω/km (lengths uniform;
/// per-km values typical of overhead distribution conductors, common practice).</item>
/// <item>Every bus but the substation carries load with probability 0.85, with a weight drawn uniformly from 0.3–1.7; real loads are the
/// weights scaled to <see cref="FeederGeneratorOptions.TotalLoadKw"/>; each load's power factor is drawn uniformly from 0.85–0.98 (lagging).</item>
/// <item>All impedances are multiplied by one common factor, found by bisection, so that the base-case exact AC power flow has its lowest
/// voltage at <see cref="FeederGeneratorOptions.TargetMinVoltagePu"/>; impedances are then rounded to 1e-6 Ω.</item>
/// <item>Each line's ampacity is the smallest of 100, 150, 200, 300, 400, 600, 800 A that is at least 1.25 times its base-case current
/// (above 800 A: that current times 1.25 rounded up to 100 A).</item>
/// </list>
/// </summary>
public static class FeederGenerator
{
    private static readonly double[] AmpacityRatings = [100, 150, 200, 300, 400, 600, 800];

    /// <summary>Generates a radial feeder of <paramref name="busCount"/> buses.</summary>
    /// <exception cref="ArgumentOutOfRangeException"><paramref name="busCount"/> is below 2 or above 100 000.</exception>
    public static Feeder Generate(int busCount, ulong seed, FeederGeneratorOptions? options = null)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(busCount, 2);
        ArgumentOutOfRangeException.ThrowIfGreaterThan(busCount, 100_000);
        var o = options ?? FeederGeneratorOptions.Default;
        var rng = new SeededRandom(seed);

        var parentOf = new List<int>(busCount) { -1 };
        var lengthR = new List<double>(busCount) { 0 };
        var lengthX = new List<double>(busCount) { 0 };
        int trunk = Math.Min(busCount, Math.Max(4, (int)Math.Round(2 * Math.Sqrt(busCount))));
        for (int i = 1; i < trunk; i++)
        {
            double km = rng.NextDouble(0.2, 0.6);
            parentOf.Add(i - 1);
            lengthR.Add(km * 0.15);
            lengthX.Add(km * 0.35);
        }
        while (parentOf.Count < busCount)
        {
            int at = rng.NextInt(1, parentOf.Count);
            int length = Math.Min(rng.NextInt(2, 9), busCount - parentOf.Count);
            int prev = at;
            for (int j = 0; j < length; j++)
            {
                double km = rng.NextDouble(0.05, 0.3);
                parentOf.Add(prev);
                lengthR.Add(km * 0.45);
                lengthX.Add(km * 0.40);
                prev = parentOf.Count - 1;
            }
        }

        var weight = new double[busCount];
        var pf = new double[busCount];
        double sum = 0;
        for (int i = 1; i < busCount; i++)
        {
            bool loaded = rng.NextDouble() < 0.85;
            double w = rng.NextDouble(0.3, 1.7);
            pf[i] = rng.NextDouble(0.85, 0.98);
            if (loaded)
            {
                weight[i] = w;
                sum += w;
            }
        }
        if (sum == 0)
        {
            weight[busCount - 1] = 1;
            sum = 1;
        }

        var buses = new Bus[busCount];
        for (int i = 0; i < busCount; i++)
        {
            double p = o.TotalLoadKw * weight[i] / sum;
            double q = p == 0 ? 0 : p * Math.Tan(Math.Acos(pf[i]));
            string id = (i + 1).ToString(System.Globalization.CultureInfo.InvariantCulture);
            buses[i] = new Bus(id, i == 0 ? "substation" : i < trunk ? $"trunk {id}" : $"lateral {id}", o.BaseKv, p, q, o.VMinPu, o.VMaxPu);
        }
        var substation = new Substation("1", 1.0, 1.5 * o.TotalLoadKw);
        string name = $"generated-{busCount}-seed-{seed}";
        const string source = "FedGrid feeder generator (rule documented in FeederGenerator and the README)";

        Feeder Build(double scale, IReadOnlyList<double>? ampacity, bool round)
        {
            var lines = new Line[busCount - 1];
            for (int i = 1; i < busCount; i++)
            {
                double r = lengthR[i] * scale, x = lengthX[i] * scale;
                if (round)
                {
                    r = Math.Max(1e-6, Math.Round(r, 6));
                    x = Math.Round(x, 6);
                }
                lines[i - 1] = new Line(buses[parentOf[i]].Id, buses[i].Id, r, x, ampacity?[i - 1] ?? 1e5);
            }
            return Feeder.Create(name, buses, lines, substation, o.BaseMva, source);
        }

        double MinVoltage(Feeder f)
        {
            var res = new AcPowerFlow(f.Network).SolveBaseCase();
            return res.Converged ? res.MinVoltagePu : 0;
        }

        // Bisection on the common impedance factor.
        double lo = 0, hi = 1;
        for (int k = 0; k < 60 && MinVoltage(Build(hi, null, false)) > o.TargetMinVoltagePu; k++)
            hi *= 2;
        for (int k = 0; k < 60; k++)
        {
            double mid = 0.5 * (lo + hi);
            if (MinVoltage(Build(mid, null, false)) > o.TargetMinVoltagePu) lo = mid;
            else hi = mid;
        }
        double scaleFactor = 0.5 * (lo + hi);

        Feeder sized = Build(scaleFactor, null, true);
        var flow = new AcPowerFlow(sized.Network).SolveBaseCase();
        var amps = new double[busCount - 1];
        var net = sized.Network;
        for (int i = 1; i < busCount; i++)
        {
            double current = flow.CurrentPu[i] * net.CurrentBaseA[i] * 1.25;
            double rating = Math.Ceiling(current / 100) * 100;
            foreach (double a in AmpacityRatings)
            {
                if (a >= current)
                {
                    rating = a;
                    break;
                }
            }
            amps[net.ParentLine[i]] = rating;
        }
        return Build(scaleFactor, amps, true);
    }
}
