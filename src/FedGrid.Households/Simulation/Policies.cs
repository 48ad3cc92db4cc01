namespace FedGrid.Households.Simulation;

/// <summary>A rule that picks every household's flexible setpoint from the environment's current state.</summary>
public interface IDemandResponsePolicy
{
    /// <summary>Short name used in reports.</summary>
    string Name { get; }

    /// <summary>Writes one setpoint per household (kW), each inside [FlexMinKw, FlexDesiredKw]. Must not allocate.</summary>
    void Decide(DemandResponseEnvironment environment, Span<double> setpointsKw);
}

/// <summary>The no-control baseline: every household runs its flexible load as it wants (setpoint = desired).</summary>
public sealed class NoControlPolicy : IDemandResponsePolicy
{
    /// <inheritdoc />
    public string Name => "noControl";

    /// <inheritdoc />
    public void Decide(DemandResponseEnvironment environment, Span<double> setpointsKw)
    {
        ArgumentNullException.ThrowIfNull(environment);
        environment.FlexDesiredKw.CopyTo(setpointsKw);
    }
}

/// <summary>
/// A simple price-responsive rule: while the price is at or above <see cref="ThresholdPerKwh"/>,
/// every household runs its flexible load at its minimum; otherwise at desired. So that all the
/// deferred load does not come back in the same slot when the price falls (the synchronised
/// rebound known from direct load control, common practice), household m keeps its minimum for
/// another (m mod (<see cref="ReleaseSpreadSlots"/> + 1)) slots after the last high-price slot — a
/// fixed, staggered release. With a time-of-use tariff and the threshold at its peak price this is
/// "minimum during peak, staggered restart".
/// </summary>
public sealed class PriceThresholdPolicy : IDemandResponsePolicy
{
    private int _lastHighSlot = int.MinValue / 2;

    /// <summary>Creates the rule.</summary>
    /// <param name="thresholdPerKwh">Price from which flexible load is held at minimum, $ per kWh.</param>
    /// <param name="releaseSpreadSlots">Largest extra wait after a high-price period, slots (0 = everyone restarts at once).</param>
    public PriceThresholdPolicy(double thresholdPerKwh, int releaseSpreadSlots = 0)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(releaseSpreadSlots);
        ThresholdPerKwh = thresholdPerKwh;
        ReleaseSpreadSlots = releaseSpreadSlots;
    }

    /// <summary>
    /// The rule's usual threshold for a tariff over <paramref name="slots"/> slots: the peak price of a time-of-use
    /// tariff; for any other tariff the 80th percentile of its prices over the horizon (the dearest fifth of the slots).
    /// </summary>
    public static double ThresholdFor(Tariffs.ITariff tariff, int slots)
    {
        ArgumentNullException.ThrowIfNull(tariff);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(slots);
        if (tariff is Tariffs.TimeOfUseTariff tou) return tou.HighestPrice;
        var prices = new double[slots];
        for (int t = 0; t < slots; t++) prices[t] = tariff.PriceAt(t);
        return ThresholdFor(prices);
    }

    /// <summary>The rule's threshold for a list of prices (e.g. a forecast): their 80th percentile (the lower of the two neighbours).</summary>
    /// <param name="prices">The prices, $ per kWh (not changed).</param>
    public static double ThresholdFor(ReadOnlySpan<double> prices)
    {
        if (prices.IsEmpty) throw new ArgumentException("At least one price is needed.", nameof(prices));
        double[] sorted = prices.ToArray();
        Array.Sort(sorted);
        return sorted[(int)Math.Floor(0.8 * (sorted.Length - 1))];
    }

    /// <summary>The staggered release the demo and the training warm start use: up to 3 h (12 slots).</summary>
    public const int DefaultReleaseSpreadSlots = 12;

    /// <summary>Price from which load is held at minimum, $ per kWh.</summary>
    public double ThresholdPerKwh { get; }

    /// <summary>Largest extra wait after a high-price period, slots.</summary>
    public int ReleaseSpreadSlots { get; }

    /// <inheritdoc />
    public string Name => "rule";

    /// <inheritdoc />
    public void Decide(DemandResponseEnvironment environment, Span<double> setpointsKw)
    {
        ArgumentNullException.ThrowIfNull(environment);
        int slot = environment.Slot;
        if (slot < _lastHighSlot) _lastHighSlot = int.MinValue / 2; // the environment was reset
        if (environment.PricePerKwh >= ThresholdPerKwh) _lastHighSlot = slot;
        int since = slot - _lastHighSlot; // 0 while the price is high
        ReadOnlySpan<double> min = environment.FlexMinKw, desired = environment.FlexDesiredKw;
        for (int m = 0; m < setpointsKw.Length; m++)
            setpointsKw[m] = since <= m % (ReleaseSpreadSlots + 1) ? min[m] : desired[m];
    }
}
