using System.Collections.Immutable;
using FedGrid.Grid.Numerics;

namespace FedGrid.Households.Data;

/// <summary>
/// Seeded synthetic household data. For each household and day (rules of our own):
/// <list type="bullet">
/// <item>Occupancy: asleep counts as home. Weekdays: leave around <see cref="OccupancySchedule.LeaveSlot"/> and return around
/// <see cref="OccupancySchedule.ReturnSlot"/> (±30 and ±45 min), or stay home all day with
/// <see cref="OccupancySchedule.HomeWeekdayProbability"/>. Weekends: wake two hours later, and with
/// <see cref="OccupancySchedule.WeekendOutingProbability"/> go out once for 2–5 h starting 10:00–15:00.</item>
/// <item>Base load: standby always; while home and awake, a morning bump after waking, a daytime level and an evening
/// bump centred 19:00 (weekends: a larger midday level); multiplied by exp of an AR(1) noise of size
/// <see cref="BaseLoadProfile.Noise"/>; short 1.5–2.5 kW kettle/oven events while home and awake.</item>
/// <item>Hot water (thermal appliance): a 30–60 L shower after waking, 10–30 L around the evening meal, 3–8 L small draws, only while home.</item>
/// <item>Charging sessions (deferrable appliance): on returning home after being out (weekdays) an arrival with 4–14 kWh wanted by the next
/// departure (or 07:30 next day); on weekends a session after an outing with 2–8 kWh, wanted by 08:00 next day.</item>
/// <item>Curtailable appliance: space conditioning wants 40–100 % of rated power while home and awake from 16:00 (and
/// all day on weekends at home); a pool pump wants rated power 10:00–16:00.</item>
/// </list>
/// Each household draws from its own stream of <see cref="SeededRandom"/> (seed, position in the list), so traces do not depend on each other.
/// </summary>
public static class SyntheticData
{
    /// <summary>Generates traces for all households over <paramref name="days"/> days.</summary>
    public static ImmutableArray<HouseholdTrace> Generate(IReadOnlyList<Household> households, int days, SlotCalendar calendar, ulong seed)
    {
        ArgumentNullException.ThrowIfNull(households);
        var traces = ImmutableArray.CreateBuilder<HouseholdTrace>(households.Count);
        for (int i = 0; i < households.Count; i++)
            traces.Add(Generate(households[i], days, calendar, SeededRandom.ForStream(seed, (ulong)i)));
        return traces.MoveToImmutable();
    }

    /// <summary>Generates one household's trace from its own seed.</summary>
    public static HouseholdTrace Generate(Household household, int days, SlotCalendar calendar, ulong seed) =>
        Generate(household, days, calendar, new SeededRandom(seed));

    private static HouseholdTrace Generate(Household household, int days, SlotCalendar calendar, SeededRandom rng)
    {
        ArgumentNullException.ThrowIfNull(household);
        ArgumentNullException.ThrowIfNull(calendar);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(days);
        const int D = SlotCalendar.SlotsPerDay;
        int n = days * D;
        var occupied = new bool[n];
        var awake = new bool[n];
        var returns = new List<(int Slot, bool Weekend)>();
        var departures = new List<int>();
        OccupancySchedule o = household.Occupancy;

        for (int d = 0; d < days; d++)
        {
            int s0 = d * D;
            bool weekend = calendar.IsWeekend(s0);
            int wake = Math.Clamp(o.WakeSlot + (weekend ? 8 : 0) + rng.NextInt(-2, 3), 0, D - 1);
            int bed = Math.Clamp(o.BedSlot + rng.NextInt(-2, 3), wake + 1, D);
            for (int s = 0; s < D; s++)
            {
                occupied[s0 + s] = true;
                awake[s0 + s] = s >= wake && s < bed;
            }
            int leave = -1, back = -1;
            if (!weekend && !(rng.NextDouble() < o.HomeWeekdayProbability))
            {
                leave = Math.Clamp(o.LeaveSlot + rng.NextInt(-2, 3), wake + 1, D - 2);
                back = Math.Clamp(o.ReturnSlot + rng.NextInt(-3, 4), leave + 1, D - 1);
            }
            else if (weekend && rng.NextDouble() < o.WeekendOutingProbability)
            {
                leave = rng.NextInt(40, 60);
                back = Math.Min(D - 1, leave + rng.NextInt(8, 21));
            }
            if (leave >= 0)
            {
                for (int s = leave; s < back; s++) occupied[s0 + s] = false;
                departures.Add(s0 + leave);
                returns.Add((s0 + back, weekend));
            }
        }

        // Base load.
        BaseLoadProfile p = household.BaseLoad;
        var baseKw = new double[n];
        double noise = 0;
        int kettle = 0;
        double kettleKw = 0;
        for (int t = 0; t < n; t++)
        {
            int s = SlotCalendar.SlotOfDay(t);
            bool weekend = calendar.IsWeekend(t);
            double kw = p.StandbyKw;
            bool active = occupied[t] && awake[t];
            if (active)
            {
                int wakeSlot = FirstAwake(awake, t);
                double sinceWake = (t - wakeSlot) * SlotCalendar.SlotHours;
                kw += p.MorningKw * Bump(sinceWake, 0.75, 1.0);
                double h = s * SlotCalendar.SlotHours;
                kw += (weekend ? 1.5 : 1.0) * p.DaytimeKw;
                kw += p.EveningKw * Bump(h, 19.0, 2.5);
                if (kettle == 0 && rng.NextDouble() < 0.03)
                {
                    kettle = rng.NextInt(1, 3);
                    kettleKw = rng.NextDouble(1.5, 2.5);
                }
            }
            if (kettle > 0)
            {
                kw += kettleKw;
                kettle--;
            }
            noise = 0.8 * noise + 0.6 * p.Noise * rng.NextGaussian();
            baseKw[t] = kw * Math.Exp(noise - 0.5 * p.Noise * p.Noise);
        }

        // Hot water.
        var draws = new double[n];
        if (household.Thermal is not null)
        {
            for (int d = 0; d < days; d++)
            {
                int s0 = d * D;
                int wakeSlot = FirstAwake(awake, s0 + D - 1, s0);
                if (wakeSlot >= 0)
                {
                    int shower = Math.Min(s0 + D - 1, wakeSlot + rng.NextInt(0, 3));
                    if (occupied[shower]) draws[shower] += rng.NextDouble(30, 60);
                }
                int meal = s0 + 76 + rng.NextInt(-2, 5);
                if (meal < n && occupied[meal] && awake[meal]) draws[meal] += rng.NextDouble(10, 30);
            }
            for (int t = 0; t < n; t++)
                if (occupied[t] && awake[t] && rng.NextDouble() < 0.06) draws[t] += rng.NextDouble(3, 8);
        }

        // Charging sessions: one per return home, wanted by the next departure.
        var sessions = ImmutableArray.CreateBuilder<ChargingSession>();
        if (household.Deferrable is not null)
        {
            int lastDeadline = -1;
            foreach ((int arrive0, bool weekend) in returns)
            {
                int arrive = arrive0 + rng.NextInt(0, 2);
                if (arrive <= lastDeadline || arrive >= n) continue;
                int nextLeave = -1;
                foreach (int dep in departures)
                    if (dep > arrive) { nextLeave = dep; break; }
                int fallback = (SlotCalendar.DayOf(arrive) + 1) * D + (weekend ? 32 : 30);
                int deadline = nextLeave > arrive && nextLeave <= fallback ? nextLeave : fallback;
                double energy = weekend ? rng.NextDouble(2, 8) : rng.NextDouble(4, 14);
                sessions.Add(new ChargingSession(arrive, deadline, Math.Round(energy, 3)));
                lastDeadline = deadline;
            }
        }

        // Curtailable appliance.
        var curtail = new double[n];
        if (household.Curtailable is { } c)
        {
            double level = rng.NextDouble(0.4, 1.0);
            for (int t = 0; t < n; t++)
            {
                int s = SlotCalendar.SlotOfDay(t);
                if (SlotCalendar.SlotOfDay(t) == 0) level = rng.NextDouble(0.4, 1.0);
                curtail[t] = c.Use switch
                {
                    CurtailableUse.PoolPump => s >= 40 && s < 64 ? c.RatedKw : 0,
                    _ => occupied[t] && awake[t] && (s >= 64 || calendar.IsWeekend(t)) ? c.RatedKw * level : 0,
                };
            }
        }

        double tank0 = household.Thermal is { } th ? Math.Round(rng.NextDouble(th.LowerComfortC + 5, th.SetpointC), 2) : 0;
        return new HouseholdTrace(household.Id, [.. baseKw], [.. occupied], [.. draws], [.. curtail], sessions.ToImmutable(), tank0);
    }

    private static double Bump(double x, double centre, double halfWidth)
    {
        double d = Math.Abs(x - centre);
        return d >= halfWidth ? 0 : 0.5 * (1 + Math.Cos(Math.PI * d / halfWidth));
    }

    // First awake slot of the day containing t, searching up to t (or -1).
    private static int FirstAwake(bool[] awake, int t, int dayStart = -1)
    {
        int s0 = dayStart >= 0 ? dayStart : t - SlotCalendar.SlotOfDay(t);
        for (int s = s0; s <= t; s++)
            if (awake[s]) return s;
        return dayStart >= 0 ? -1 : t;
    }
}
