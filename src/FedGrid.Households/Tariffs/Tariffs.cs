using System.Collections.Immutable;
using FedGrid.Grid.Numerics;

namespace FedGrid.Households.Tariffs;

/// <summary>An energy price per slot, in $ per kWh. Bills are Σ price × kW × 0.25 h.</summary>
public interface ITariff
{
    /// <summary>Tariff name.</summary>
    string Name { get; }

    /// <summary>Price in horizon slot <paramref name="slot"/>, $ per kWh.</summary>
    double PriceAt(int slot);
}

/// <summary>A time-of-use period: [StartSlot, EndSlot) of the day at one price.</summary>
/// <param name="Name">Period name, e.g. "off-peak", "shoulder", "peak".</param>
/// <param name="StartSlot">First slot of day (0..95).</param>
/// <param name="EndSlot">Slot of day at which the period ends (exclusive, 1..96).</param>
/// <param name="PricePerKwh">Price, $ per kWh.</param>
public sealed record TouPeriod(string Name, int StartSlot, int EndSlot, double PricePerKwh);

/// <summary>
/// Time-of-use tariff: a weekday and a weekend schedule of periods. Slots a schedule leaves
/// uncovered are priced at <see cref="DefaultPricePerKwh"/> under <see cref="DefaultPeriodName"/>.
/// Periods of one schedule must not overlap.
/// </summary>
public sealed record TimeOfUseTariff : ITariff
{
    private readonly double[] _weekdayPrice = new double[SlotCalendar.SlotsPerDay];
    private readonly double[] _weekendPrice = new double[SlotCalendar.SlotsPerDay];
    private readonly string[] _weekdayName = new string[SlotCalendar.SlotsPerDay];
    private readonly string[] _weekendName = new string[SlotCalendar.SlotsPerDay];

    /// <summary>Creates a tariff and checks its periods.</summary>
    /// <exception cref="ArgumentException">A period is outside the day, empty, overlapping or has a non-finite or negative price.</exception>
    public TimeOfUseTariff(string name, SlotCalendar calendar, string defaultPeriodName, double defaultPricePerKwh,
        ImmutableArray<TouPeriod> weekday, ImmutableArray<TouPeriod> weekend)
    {
        if (!(defaultPricePerKwh >= 0 && double.IsFinite(defaultPricePerKwh)))
            throw new ArgumentException($"tariff '{name}': default price must be finite and non-negative, got {defaultPricePerKwh}");
        Name = name;
        Calendar = calendar;
        DefaultPeriodName = defaultPeriodName;
        DefaultPricePerKwh = defaultPricePerKwh;
        Weekday = weekday;
        Weekend = weekend;
        Fill(weekday, "weekday", _weekdayPrice, _weekdayName);
        Fill(weekend, "weekend", _weekendPrice, _weekendName);
    }

    /// <inheritdoc />
    public string Name { get; }

    /// <summary>The calendar that decides weekdays and weekends.</summary>
    public SlotCalendar Calendar { get; }

    /// <summary>Name of the price outside every period.</summary>
    public string DefaultPeriodName { get; }

    /// <summary>Price outside every period, $ per kWh.</summary>
    public double DefaultPricePerKwh { get; }

    /// <summary>Monday-to-Friday periods.</summary>
    public ImmutableArray<TouPeriod> Weekday { get; }

    /// <summary>Saturday and Sunday periods.</summary>
    public ImmutableArray<TouPeriod> Weekend { get; }

    /// <inheritdoc />
    public double PriceAt(int slot)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(slot);
        return (Calendar.IsWeekend(slot) ? _weekendPrice : _weekdayPrice)[SlotCalendar.SlotOfDay(slot)];
    }

    /// <summary>Name of the period a slot falls in.</summary>
    public string PeriodAt(int slot)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(slot);
        return (Calendar.IsWeekend(slot) ? _weekendName : _weekdayName)[SlotCalendar.SlotOfDay(slot)];
    }

    /// <summary>The highest price of the tariff, $ per kWh.</summary>
    public double HighestPrice => Math.Max(_weekdayPrice.Max(), _weekendPrice.Max());

    private void Fill(ImmutableArray<TouPeriod> periods, string which, double[] price, string[] names)
    {
        Array.Fill(price, DefaultPricePerKwh);
        Array.Fill(names, DefaultPeriodName);
        var taken = new bool[SlotCalendar.SlotsPerDay];
        for (int k = 0; k < periods.Length; k++)
        {
            TouPeriod p = periods[k];
            string at = $"tariff '{Name}': {which} period {k} ('{p.Name}')";
            if (p.StartSlot < 0 || p.EndSlot > SlotCalendar.SlotsPerDay || p.EndSlot <= p.StartSlot)
                throw new ArgumentException($"{at}: slots [{p.StartSlot}, {p.EndSlot}) are not a non-empty part of one day (0..96)");
            if (!(p.PricePerKwh >= 0 && double.IsFinite(p.PricePerKwh)))
                throw new ArgumentException($"{at}: price must be finite and non-negative, got {p.PricePerKwh}");
            for (int s = p.StartSlot; s < p.EndSlot; s++)
            {
                if (taken[s])
                    throw new ArgumentException($"{at}: overlaps another period at {SlotCalendar.FormatClock(s)}");
                taken[s] = true;
                price[s] = p.PricePerKwh;
                names[s] = p.Name;
            }
        }
    }
}

/// <summary>
/// Parameters of the real-time price process, per slot t with slot-of-day h:
/// <c>price = max(Floor, Shape(h) + x_t + spike_t)</c>, where Shape is a daily curve (a base price
/// plus a morning and an evening raised-cosine hump), x_t is a mean-reverting AR(1) deviation
/// <c>x_{t+1} = Reversion·x_t + Volatility·N(0,1)</c> (a discretised Ornstein–Uhlenbeck process),
/// and spikes start with probability <see cref="SpikeProbability"/> per slot, with an exponentially
/// distributed height of mean <see cref="SpikeMeanPerKwh"/>, decaying by <see cref="SpikeDecay"/> per slot.
/// </summary>
/// <param name="BasePerKwh">Night price level, $ per kWh.</param>
/// <param name="MorningHumpPerKwh">Height of the morning hump (centred 08:00), $ per kWh.</param>
/// <param name="EveningHumpPerKwh">Height of the evening hump (centred 19:00), $ per kWh.</param>
/// <param name="Reversion">AR(1) coefficient in [0, 1): closer to 1 reverts more slowly.</param>
/// <param name="Volatility">Standard deviation of the per-slot innovation, $ per kWh.</param>
/// <param name="SpikeProbability">Chance a spike starts in a slot.</param>
/// <param name="SpikeMeanPerKwh">Mean spike height, $ per kWh.</param>
/// <param name="SpikeDecay">Fraction of a spike left after each slot, in [0, 1).</param>
/// <param name="FloorPerKwh">Lowest price, $ per kWh.</param>
public sealed record RealTimePriceModel(double BasePerKwh = 0.12, double MorningHumpPerKwh = 0.06, double EveningHumpPerKwh = 0.14,
    double Reversion = 0.9, double Volatility = 0.01, double SpikeProbability = 0.004, double SpikeMeanPerKwh = 0.6,
    double SpikeDecay = 0.6, double FloorPerKwh = 0.01)
{
    /// <summary>The deterministic daily shape at a slot of day, $ per kWh.</summary>
    public double Shape(int slotOfDay)
    {
        double h = slotOfDay * SlotCalendar.SlotHours;
        return BasePerKwh + MorningHumpPerKwh * Hump(h, 8.0, 3.0) + EveningHumpPerKwh * Hump(h, 19.0, 4.0);
    }

    private static double Hump(double hour, double centre, double halfWidth)
    {
        double d = Math.Abs(hour - centre);
        return d >= halfWidth ? 0 : 0.5 * (1 + Math.Cos(Math.PI * d / halfWidth));
    }
}

/// <summary>A real-time tariff: one drawn price per horizon slot from a <see cref="RealTimePriceModel"/>.</summary>
public sealed record RealTimeTariff : ITariff
{
    private RealTimeTariff(string name, RealTimePriceModel model, ulong seed, ImmutableArray<double> prices)
    {
        Name = name;
        Model = model;
        Seed = seed;
        Prices = prices;
    }

    /// <inheritdoc />
    public string Name { get; }

    /// <summary>The process the prices were drawn from.</summary>
    public RealTimePriceModel Model { get; }

    /// <summary>Seed of the draw.</summary>
    public ulong Seed { get; }

    /// <summary>Price per horizon slot, $ per kWh.</summary>
    public ImmutableArray<double> Prices { get; }

    /// <inheritdoc />
    public double PriceAt(int slot) =>
        (uint)slot < (uint)Prices.Length ? Prices[slot]
            : throw new ArgumentOutOfRangeException(nameof(slot), $"real-time tariff '{Name}' has prices for slots 0..{Prices.Length - 1}, asked for {slot}");

    /// <summary>Draws <paramref name="slots"/> prices; the same seed gives the same prices.</summary>
    public static RealTimeTariff Generate(string name, RealTimePriceModel model, int slots, ulong seed)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(slots);
        if (!(model.Reversion >= 0 && model.Reversion < 1) || !(model.SpikeDecay >= 0 && model.SpikeDecay < 1)
            || !(model.Volatility >= 0) || !(model.SpikeProbability is >= 0 and <= 1) || !(model.SpikeMeanPerKwh >= 0))
            throw new ArgumentException("real-time price model: need 0 ≤ reversion < 1, 0 ≤ spike decay < 1, volatility ≥ 0, spike probability in [0, 1], spike mean ≥ 0");
        var rng = SeededRandom.ForStream(seed, 0x7072696365UL);
        var prices = new double[slots];
        double x = 0, spike = 0;
        for (int t = 0; t < slots; t++)
        {
            if (rng.NextDouble() < model.SpikeProbability) spike += -model.SpikeMeanPerKwh * Math.Log(1 - rng.NextDouble()); // exponential, mean SpikeMeanPerKwh
            prices[t] = Math.Max(model.FloorPerKwh, model.Shape(SlotCalendar.SlotOfDay(t)) + x + spike);
            x = model.Reversion * x + model.Volatility * rng.NextGaussian();
            spike *= model.SpikeDecay;
        }
        return new RealTimeTariff(name, model, seed, [.. prices]);
    }
}
