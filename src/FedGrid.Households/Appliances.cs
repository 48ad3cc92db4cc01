namespace FedGrid.Households;

/// <summary>
/// A flexible appliance of a household. Each kind turns its state and the day's events into a
/// per-slot minimum and desired power (kW) and prices shortfall with its
/// <see cref="DiscomfortWeight"/> ($ per kWh). All dynamics are linear in power and state, so a
/// perfect-foresight day can be written as a convex program from these parameters and the
/// household's <see cref="HouseholdTrace"/>.
/// </summary>
/// <param name="Id">Appliance name, unique within its household.</param>
/// <param name="DiscomfortWeight">Price of one kWh of shortfall, $ per kWh; also the appliance's priority when a household setpoint is split.</param>
public abstract record Appliance(string Id, double DiscomfortWeight)
{
    /// <summary>Short kind name used in files and reports.</summary>
    public abstract string Kind { get; }
}

/// <summary>
/// Deferrable energy with a deadline, e.g. vehicle charging. A session (see
/// <see cref="ChargingSession"/>) asks for an energy by a deadline; energy not delivered in a
/// slot carries forward. In slot t of a session with remaining energy E and deadline slot D
/// (the vehicle leaves at the start of D), with Δt = 0.25 h and k = D − t − 1 slots left after t:
/// minimum = clamp((E − MaxKw·Δt·k)/Δt, 0, desired) — the least power that still lets the
/// session finish at full power; desired = min(MaxKw, E/Δt) — charge as soon as possible.
/// Discomfort: <see cref="Appliance.DiscomfortWeight"/> × (desired − power)·Δt for every deferred
/// kWh, plus <see cref="UnmetEnergyPenalty"/> × energy still missing when the vehicle leaves.
/// </summary>
/// <param name="Id">Appliance name.</param>
/// <param name="MaxKw">Charger power limit, kW.</param>
/// <param name="DeferralWeight">$ per kWh deferred to a later slot (the per-slot shortfall weight).</param>
/// <param name="UnmetEnergyPenalty">$ per kWh not delivered by the deadline.</param>
public sealed record DeferrableLoad(string Id, double MaxKw, double DeferralWeight, double UnmetEnergyPenalty)
    : Appliance(Id, DeferralWeight)
{
    /// <inheritdoc />
    public override string Kind => "deferrable";

    /// <summary>Desired power with <paramref name="remainingKwh"/> still to deliver: full power while energy remains.</summary>
    public double DesiredKw(double remainingKwh) =>
        remainingKwh <= 0 ? 0 : Math.Min(MaxKw, remainingKwh / SlotCalendar.SlotHours);

    /// <summary>
    /// Least power in slot <paramref name="slot"/> that still lets <paramref name="remainingKwh"/> be delivered
    /// before <paramref name="deadlineSlot"/> at full power afterwards (capped at the desired power when even that is not enough).
    /// </summary>
    public double MinKw(double remainingKwh, int slot, int deadlineSlot)
    {
        if (remainingKwh <= 0 || slot >= deadlineSlot) return 0;
        int after = deadlineSlot - slot - 1;
        double need = (remainingKwh - MaxKw * SlotCalendar.SlotHours * after) / SlotCalendar.SlotHours;
        return Math.Clamp(need, 0, DesiredKw(remainingKwh));
    }
}

/// <summary>
/// Thermal storage, e.g. an electric water heater: a fully mixed tank whose state is the stored
/// energy E above the inlet temperature, E = C·(T − InletC) with heat capacity
/// C = litres × 1 kg/L × 4.186 kJ/(kg·K) / 3600 (kWh/K). One slot (Δt = 0.25 h), heater power p,
/// hot-water draw of L litres:
/// <c>E' = E + p·Δt − LossKwPerK·Δt·(E/C + InletC − AmbientC) − (L/litres)·E</c>
/// (standing loss through the jacket; a draw replaces hot water by inlet water) — linear in E and p.
/// Minimum = power that keeps E' at or above the lower comfort energy; desired = power that brings
/// E' to the setpoint; both clamped to [0, HeaterKw]. Discomfort:
/// <see cref="Appliance.DiscomfortWeight"/> × kWh by which E' falls below the lower comfort energy.
/// </summary>
/// <param name="Id">Appliance name.</param>
/// <param name="TankLitres">Tank volume, litres.</param>
/// <param name="HeaterKw">Element power, kW.</param>
/// <param name="SetpointC">Thermostat setpoint, °C.</param>
/// <param name="LowerComfortC">Lowest acceptable tank temperature, °C.</param>
/// <param name="InletC">Cold-water inlet temperature, °C.</param>
/// <param name="AmbientC">Temperature around the tank, °C.</param>
/// <param name="LossKwPerK">Standing-loss coefficient (UA), kW per kelvin of tank-to-ambient difference.</param>
/// <param name="ShortfallWeight">$ per kWh below the lower comfort energy.</param>
public sealed record ThermalStorage(string Id, double TankLitres, double HeaterKw, double SetpointC, double LowerComfortC,
    double InletC, double AmbientC, double LossKwPerK, double ShortfallWeight) : Appliance(Id, ShortfallWeight)
{
    /// <summary>Specific heat of water, kJ/(kg·K) (handbook value near 20-60 °C).</summary>
    public const double WaterSpecificHeatKjPerKgK = 4.186;

    /// <inheritdoc />
    public override string Kind => "thermal";

    /// <summary>Heat capacity of the full tank, kWh per kelvin (water density 1 kg/L).</summary>
    public double HeatCapacityKwhPerK => TankLitres * WaterSpecificHeatKjPerKgK / 3600.0;

    /// <summary>Stored energy above inlet at temperature <paramref name="temperatureC"/>, kWh.</summary>
    public double EnergyAt(double temperatureC) => HeatCapacityKwhPerK * (temperatureC - InletC);

    /// <summary>Tank temperature for stored energy <paramref name="energyKwh"/>, °C.</summary>
    public double TemperatureAt(double energyKwh) => InletC + energyKwh / HeatCapacityKwhPerK;

    /// <summary>Energy at the setpoint, kWh.</summary>
    public double SetpointEnergyKwh => EnergyAt(SetpointC);

    /// <summary>Energy at the lower comfort bound, kWh.</summary>
    public double LowerComfortEnergyKwh => EnergyAt(LowerComfortC);

    /// <summary>Stored energy after one slot at heater power <paramref name="powerKw"/> with a draw of <paramref name="drawLitres"/>.</summary>
    public double EnergyAfter(double energyKwh, double powerKw, double drawLitres)
    {
        double dt = SlotCalendar.SlotHours;
        double loss = LossKwPerK * dt * (energyKwh / HeatCapacityKwhPerK + InletC - AmbientC);
        double drawn = Math.Min(drawLitres, TankLitres) / TankLitres * energyKwh;
        return energyKwh + powerKw * dt - loss - drawn;
    }

    /// <summary>Least heater power that keeps the tank at or above the lower comfort bound after the slot.</summary>
    public double MinKw(double energyKwh, double drawLitres) =>
        Math.Clamp((LowerComfortEnergyKwh - EnergyAfter(energyKwh, 0, drawLitres)) / SlotCalendar.SlotHours, 0, HeaterKw);

    /// <summary>Heater power that brings the tank to the setpoint after the slot (at most the element power).</summary>
    public double DesiredKw(double energyKwh, double drawLitres) =>
        Math.Clamp((SetpointEnergyKwh - EnergyAfter(energyKwh, 0, drawLitres)) / SlotCalendar.SlotHours, 0, HeaterKw);

    /// <summary>Discomfort of ending a slot with <paramref name="energyAfterKwh"/> stored, $.</summary>
    public double Discomfort(double energyAfterKwh) => ShortfallWeight * Math.Max(0, LowerComfortEnergyKwh - energyAfterKwh);
}

/// <summary>What a curtailable load is for; decides the shape of its desired profile in the generator.</summary>
public enum CurtailableUse
{
    /// <summary>Space heating or cooling: wanted while the household is home and awake.</summary>
    SpaceConditioning,
    /// <summary>Pool filtration pump: runs a fixed daytime window whether anyone is home or not.</summary>
    PoolPump,
}

/// <summary>
/// A curtailable load (pool pump, heat-pump or air-conditioner flexibility): the trace gives a
/// desired power per slot; minimum = <see cref="MinFraction"/> × desired; discomfort =
/// <see cref="Appliance.DiscomfortWeight"/> × (desired − power)·Δt. Nothing carries over.
/// </summary>
/// <param name="Id">Appliance name.</param>
/// <param name="RatedKw">Rated power, kW (the generator's scale of the desired profile).</param>
/// <param name="MinFraction">Fraction of the desired power that cannot be curtailed, in [0, 1].</param>
/// <param name="ShortfallWeight">$ per kWh curtailed.</param>
/// <param name="Use">What it serves.</param>
public sealed record CurtailableLoad(string Id, double RatedKw, double MinFraction, double ShortfallWeight, CurtailableUse Use)
    : Appliance(Id, ShortfallWeight)
{
    /// <inheritdoc />
    public override string Kind => "curtailable";

    /// <summary>Minimum power when <paramref name="desiredKw"/> is wanted.</summary>
    public double MinKw(double desiredKw) => MinFraction * desiredKw;

    /// <summary>Discomfort of running at <paramref name="powerKw"/> when <paramref name="desiredKw"/> is wanted, $.</summary>
    public double Discomfort(double desiredKw, double powerKw) =>
        ShortfallWeight * Math.Max(0, desiredKw - powerKw) * SlotCalendar.SlotHours;
}
