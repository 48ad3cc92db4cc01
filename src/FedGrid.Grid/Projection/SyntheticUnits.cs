using FedGrid.Grid.Feeders;
using FedGrid.Grid.Numerics;

namespace FedGrid.Grid.Projection;

/// <summary>
/// A seeded synthetic set of flexible units for a feeder, with one slot's input: a few units per
/// load bus that together hold part of the bus's file load, proposals at the top of their boxes —
/// so the proposal overloads the feeder while the boxes' minimums leave a feasible projection.
/// For demonstrations, tests and benchmarks; invented data.
/// </summary>
/// <param name="Units">The units.</param>
/// <param name="Input">Base loads (the non-flexible share of each bus's file load) and the units' boxes and proposals.</param>
public sealed record SyntheticUnitSet(IReadOnlyList<FlexibleUnit> Units, ProjectionInput Input)
{
    /// <summary>
    /// Draws the set. Each bus with a positive file load keeps <paramref name="baseShare"/> of it as
    /// base load; 1–3 units share the rest scaled by <paramref name="overload"/> (their maximums sum to
    /// about overload × (1 − baseShare) × the bus load), with minimums at 5–15 % of the maximum,
    /// power factors 0.9–1 lagging and weights 0.5–2; every proposal is at its unit's maximum.
    /// </summary>
    public static SyntheticUnitSet Draw(Feeder feeder, ulong seed, double baseShare = 0.4, double overload = 1.6)
    {
        if (!(baseShare >= 0 && baseShare <= 1)) throw new ArgumentException($"base share must be in [0, 1], got {baseShare}");
        if (!(overload > 0) || !double.IsFinite(overload)) throw new ArgumentException($"overload must be positive, got {overload}");
        var rng = new SeededRandom(seed);
        var units = new List<FlexibleUnit>();
        var mins = new List<double>();
        var maxs = new List<double>();
        int n = feeder.Buses.Count;
        var input0 = new double[n];
        var inputQ0 = new double[n];
        for (int i = 0; i < n; i++)
        {
            var bus = feeder.Buses[i];
            input0[i] = bus.LoadPkW;
            inputQ0[i] = bus.LoadQkvar;
            if (!(bus.LoadPkW > 0)) continue;
            input0[i] = baseShare * bus.LoadPkW;
            inputQ0[i] = baseShare * bus.LoadQkvar;
            int count = 1 + (int)(rng.NextDouble() * 3);
            double flexKw = overload * (1 - baseShare) * bus.LoadPkW;
            for (int k = 0; k < count; k++)
            {
                double max = flexKw / count * (0.8 + 0.4 * rng.NextDouble());
                double min = max * (0.05 + 0.1 * rng.NextDouble());
                double pf = 0.9 + 0.1 * rng.NextDouble();
                double tanPhi = Math.Sqrt(1 - pf * pf) / pf;
                double weight = 0.5 + 1.5 * rng.NextDouble();
                units.Add(new FlexibleUnit($"{bus.Id}.{k + 1}", bus.Id, tanPhi, weight));
                mins.Add(Math.Round(min, 3));
                maxs.Add(Math.Round(max, 3));
            }
        }
        var input = new ProjectionInput(n, units.Count);
        input0.CopyTo(input.BaseLoadKw, 0);
        inputQ0.CopyTo(input.BaseLoadKvar, 0);
        for (int u = 0; u < units.Count; u++)
        {
            input.MinKw[u] = mins[u];
            input.MaxKw[u] = maxs[u];
            input.ProposalKw[u] = maxs[u];
        }
        return new SyntheticUnitSet(units, input);
    }
}

