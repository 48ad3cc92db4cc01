using System.Collections.Immutable;
using FedGrid.Grid.Feeders;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Tariffs;

namespace FedGrid.Households.Tests;

/// <summary>Small hand-made feeders and scenarios for the tests.</summary>
internal static class TestFeeders
{
    /// <summary>Two buses at 0.4 kV: transformer busbar S and one load bus L, 50 m of cable.</summary>
    public static Feeder TwoBus(double importLimitKw = 500) =>
        Feeder.Create("two-bus", [new Bus("S", "busbar", 0.4, 0, 0, 0.9, 1.1), new Bus("L", "load", 0.4, 7, 2, 0.9, 1.1)],
            [new Line("S", "L", 0.016, 0.004, 400)], new Substation("S", 1.0, importLimitKw), baseMva: 0.1);

    public static TimeOfUseTariff FlatTariff(double price = 0.2) =>
        new("flat", new SlotCalendar(), "all day", price, [], []);

    public static Household Home(string id, params Appliance[] appliances) =>
        new(id, "L", new BaseLoadProfile(0.2, 1, 0.3, 1.5, 0.2), 0.95, [.. appliances], new OccupancySchedule(26, 32, 72, 92, 0, 0));

    public static HouseholdTrace Trace(string id, int slots, double baseKw = 0.5, ChargingSession[]? sessions = null,
        double[]? drawLitres = null, double[]? curtailKw = null, double tankC = 55) =>
        new(id, [.. Enumerable.Repeat(baseKw, slots)], [.. Enumerable.Repeat(true, slots)],
            [.. drawLitres ?? new double[slots]], [.. curtailKw ?? new double[slots]], [.. sessions ?? []], tankC);

    public static Scenario OneHome(Household h, HouseholdTrace t, ITariff? tariff = null) =>
        new("test", TwoBus(), [h], [t], tariff ?? FlatTariff(), new SlotCalendar(), [], 0);
}
