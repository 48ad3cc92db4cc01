using System.Collections.Immutable;

namespace FedGrid.Households;

/// <summary>
/// Parameters of a household's uncontrollable (base) load, from which the generator draws
/// a profile: standby all day, plus activity bumps while someone is home and awake.
/// </summary>
/// <param name="StandbyKw">Always-on load (fridge, standby), kW.</param>
/// <param name="MorningKw">Extra load of the morning routine, kW (peak of the bump).</param>
/// <param name="DaytimeKw">Extra load while home during the day, kW.</param>
/// <param name="EveningKw">Extra load of the evening (cooking, lighting, TV), kW (peak of the bump).</param>
/// <param name="Noise">Relative size of the multiplicative noise (0.2 = about ±20 %).</param>
public sealed record BaseLoadProfile(double StandbyKw, double MorningKw, double DaytimeKw, double EveningKw, double Noise);

/// <summary>
/// A household's weekly routine; the generator draws each day's occupancy from it. Times are slots of day (0..95).
/// Asleep counts as home.
/// </summary>
/// <param name="WakeSlot">Usual wake-up on weekdays (weekends: two hours later).</param>
/// <param name="LeaveSlot">Usual departure on weekdays.</param>
/// <param name="ReturnSlot">Usual return on weekdays.</param>
/// <param name="BedSlot">Usual bedtime.</param>
/// <param name="HomeWeekdayProbability">Probability of staying home all of a weekday.</param>
/// <param name="WeekendOutingProbability">Probability of a few hours out on a weekend day.</param>
public sealed record OccupancySchedule(int WakeSlot, int LeaveSlot, int ReturnSlot, int BedSlot,
    double HomeWeekdayProbability, double WeekendOutingProbability);

/// <summary>
/// A household attached to a feeder bus. Discomfort weights live on each appliance
/// (<see cref="Appliance.DiscomfortWeight"/>). A household has at most one appliance of each kind.
/// </summary>
/// <param name="Id">Household name, unique in the scenario.</param>
/// <param name="BusId">Id of the feeder bus it is connected to.</param>
/// <param name="BaseLoad">Base-load profile parameters.</param>
/// <param name="PowerFactor">Power factor of the whole household (lagging), in (0, 1].</param>
/// <param name="Appliances">Flexible appliances.</param>
/// <param name="Occupancy">Weekly routine.</param>
public sealed record Household(string Id, string BusId, BaseLoadProfile BaseLoad, double PowerFactor,
    ImmutableArray<Appliance> Appliances, OccupancySchedule Occupancy)
{
    /// <summary>The deferrable appliance, if any.</summary>
    public DeferrableLoad? Deferrable => Find<DeferrableLoad>();

    /// <summary>The thermal appliance, if any.</summary>
    public ThermalStorage? Thermal => Find<ThermalStorage>();

    /// <summary>The curtailable appliance, if any.</summary>
    public CurtailableLoad? Curtailable => Find<CurtailableLoad>();

    /// <summary>Reactive power per kW of real power, tan(acos(pf)).</summary>
    public double KvarPerKw => Math.Sqrt(Math.Max(0, 1 - PowerFactor * PowerFactor)) / PowerFactor;

    private T? Find<T>() where T : Appliance
    {
        foreach (Appliance a in Appliances)
            if (a is T t) return t;
        return null;
    }
}

/// <summary>One vehicle-charging session: plugged in at the start of <paramref name="ArrivalSlot"/>, leaves at the start of <paramref name="DeadlineSlot"/>.</summary>
/// <param name="ArrivalSlot">First slot the vehicle can charge (horizon slot).</param>
/// <param name="DeadlineSlot">Slot at whose start the vehicle leaves (exclusive; horizon slot, may lie past the horizon).</param>
/// <param name="EnergyKwh">Energy wanted, kWh.</param>
public sealed record ChargingSession(int ArrivalSlot, int DeadlineSlot, double EnergyKwh);

/// <summary>
/// What happened in one household over the horizon, slot by slot (ground truth of the
/// simulation, or imported meter data): base load, occupancy, hot-water draws, the desired
/// profile of the curtailable appliance, charging sessions and the initial tank temperature.
/// Arrays have one entry per horizon slot.
/// </summary>
/// <param name="HouseholdId">The household.</param>
/// <param name="BaseKw">Base (uncontrollable) load, kW.</param>
/// <param name="Occupied">Whether anyone is home (asleep counts as home).</param>
/// <param name="HotWaterLitres">Hot water drawn in each slot, litres (zeros without a thermal appliance).</param>
/// <param name="CurtailableDesiredKw">Desired power of the curtailable appliance, kW (zeros without one).</param>
/// <param name="Sessions">Charging sessions in time order, not overlapping (empty without a deferrable appliance).</param>
/// <param name="InitialTankC">Tank temperature at slot 0, °C (ignored without a thermal appliance).</param>
public sealed record HouseholdTrace(string HouseholdId, ImmutableArray<double> BaseKw, ImmutableArray<bool> Occupied,
    ImmutableArray<double> HotWaterLitres, ImmutableArray<double> CurtailableDesiredKw, ImmutableArray<ChargingSession> Sessions,
    double InitialTankC)
{
    /// <summary>Number of slots in the trace.</summary>
    public int SlotCount => BaseKw.Length;
}
