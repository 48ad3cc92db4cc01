using System.Collections.Immutable;
using FedGrid.Grid.Feeders;
using FedGrid.Households.Data;
using FedGrid.Grid.Numerics;
using FedGrid.Households.Tariffs;

namespace FedGrid.Households.Scenarios;

/// <summary>
/// The embedded default scenario, invented for FedGrid: a small 0.4 kV underground residential
/// feeder ("demo-lv") of 18 buses — a trunk of eight cable sections with three laterals of three
/// — fed by a 160 kVA distribution transformer, with 32 households, two to four on each of 11 load
/// buses, a corner shop as a fixed load, and a three-period time-of-use tariff. Cable data are
/// typical values for aluminium XLPE cables (common practice). The structure is fixed; household
/// parameters and all traces are drawn from the seed.
/// </summary>
public static class DefaultScenario
{
    /// <summary>Name of the embedded feeder.</summary>
    public const string FeederName = "demo-lv";

    /// <summary>Default seed of <c>fedgrid demo</c>.</summary>
    public const ulong DefaultSeed = 20261201;

    /// <summary>Off-peak price, $ per kWh.</summary>
    public const double OffPeakPrice = 0.10;

    /// <summary>Shoulder price, $ per kWh.</summary>
    public const double ShoulderPrice = 0.18;

    /// <summary>Peak price, $ per kWh.</summary>
    public const double PeakPrice = 0.38;

    private static readonly string[] LoadBuses = ["B02", "B03", "B04", "B06", "B08", "B10", "B11", "B13", "B14", "B16", "B17"];
    private static readonly int[] HouseholdsPerBus = [3, 3, 2, 3, 3, 3, 3, 3, 3, 3, 3];

    /// <summary>The invented 0.4 kV feeder (base 0.1 MVA). Voltage limits 0.94–1.06 pu; transformer secondary held at 1.02 pu.</summary>
    public static Feeder CreateFeeder()
    {
        const double kv = 0.4, vmin = 0.94, vmax = 1.06;
        var buses = new List<Bus> { new("B00", "transformer LV busbar", kv, 0, 0, vmin, vmax) };
        for (int i = 1; i <= 8; i++) buses.Add(new Bus($"B{i:00}", $"trunk cabinet {i}", kv, 0, 0, vmin, vmax));
        string[] laterals = ["A", "B", "C"];
        for (int l = 0; l < 3; l++)
            for (int k = 1; k <= 3; k++)
                buses.Add(new Bus($"B{8 + 3 * l + k:00}", $"lateral {laterals[l]} joint {k}", kv, 0, 0, vmin, vmax));

        // Aluminium XLPE cables, ohm/km at 20 °C and buried ampacity (typical values, common practice).
        static Line Cable(string from, string to, double metres, double rPerKm, double xPerKm, double amps) =>
            new(from, to, rPerKm * metres / 1000, xPerKm * metres / 1000, amps);
        var lines = new List<Line> { Cable("B00", "B01", 30, 0.164, 0.070, 300) }; // 185 mm²
        for (int i = 2; i <= 8; i++) lines.Add(Cable($"B{i - 1:00}", $"B{i:00}", 50, 0.320, 0.075, 225)); // 95 mm²
        int[] tee = [3, 5, 7];
        for (int l = 0; l < 3; l++)
        {
            string prev = $"B{tee[l]:00}";
            for (int k = 1; k <= 3; k++)
            {
                string id = $"B{8 + 3 * l + k:00}";
                lines.Add(Cable(prev, id, 40, 0.641, 0.080, 140)); // 50 mm²
                prev = id;
            }
        }
        var substation = new Substation("B00", 1.02, 130);
        return Feeder.Create(FeederName, buses, lines, substation, baseMva: 0.1,
            source: "invented for FedGrid's default scenario (no real network)");
    }

    /// <summary>The default time-of-use tariff: weekdays off-peak 22:00–07:00, shoulder 07:00–16:00, peak 16:00–22:00; weekends shoulder 07:00–22:00.</summary>
    public static TimeOfUseTariff CreateTariff(SlotCalendar calendar) =>
        new("demo time-of-use", calendar, "off-peak", OffPeakPrice,
            [new TouPeriod("shoulder", 28, 64, ShoulderPrice), new TouPeriod("peak", 64, 88, PeakPrice)],
            [new TouPeriod("shoulder", 28, 88, ShoulderPrice)]);

    /// <summary>The 32 households: structure fixed, parameters drawn from <paramref name="seed"/>.</summary>
    public static ImmutableArray<Household> CreateHouseholds(ulong seed)
    {
        var rng = SeededRandom.ForStream(seed, 0x686F757365UL);
        var list = ImmutableArray.CreateBuilder<Household>(32);
        int n = 0;
        for (int b = 0; b < LoadBuses.Length; b++)
        {
            for (int k = 0; k < HouseholdsPerBus[b]; k++)
            {
                n++;
                var appliances = ImmutableArray.CreateBuilder<Appliance>();
                if (n % 3 == 1)
                    appliances.Add(new DeferrableLoad("vehicle", n % 4 == 1 ? 7.2 : 3.7, 0.02, 1.0));
                if (n % 2 == 1 || n % 5 == 0)
                    appliances.Add(new ThermalStorage("water heater", Math.Round(rng.NextDouble(150, 250) / 10) * 10, 3.0, 60, 45, 12, 20,
                        Math.Round(rng.NextDouble(0.0015, 0.0022), 5), 0.5));
                if (n % 7 == 3)
                    appliances.Add(new CurtailableLoad("pool pump", 1.1, 0.5, 0.03, CurtailableUse.PoolPump));
                else if (n % 2 == 0)
                    appliances.Add(new CurtailableLoad("heat pump", Math.Round(rng.NextDouble(1.2, 2.5), 1), 0.4, 0.08, CurtailableUse.SpaceConditioning));
                var baseLoad = new BaseLoadProfile(Math.Round(rng.NextDouble(0.15, 0.35), 3), Math.Round(rng.NextDouble(0.8, 1.6), 2),
                    Math.Round(rng.NextDouble(0.2, 0.5), 2), Math.Round(rng.NextDouble(1.0, 2.2), 2), 0.25);
                var occupancy = new OccupancySchedule(rng.NextInt(24, 29), rng.NextInt(30, 35), rng.NextInt(68, 77), rng.NextInt(88, 94),
                    Math.Round(rng.NextDouble(0.1, 0.3), 2), 0.5);
                list.Add(new Household($"H{n:00}", LoadBuses[b], baseLoad, Math.Round(rng.NextDouble(0.93, 0.98), 2), appliances.ToImmutable(), occupancy));
            }
        }
        return list.MoveToImmutable();
    }

    /// <summary>The whole default scenario for <paramref name="days"/> days starting on a Monday.</summary>
    public static Scenario Create(ulong seed = DefaultSeed, int days = 7)
    {
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(days);
        var calendar = new SlotCalendar(DayOfWeek.Monday);
        var households = CreateHouseholds(seed);
        var traces = SyntheticData.Generate(households, days, calendar, seed);
        return new Scenario("default", CreateFeeder(), households, traces, CreateTariff(calendar), calendar,
            [new FixedBusLoad("B01", 3.0, 1.0)], seed);
    }
}
