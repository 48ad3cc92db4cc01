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
/// A simple price-responsive rule: when the price is at or above <see cref="ThresholdPerKwh"/>,
/// every household goes to its minimum flexible power; otherwise it runs at desired. With a
/// time-of-use tariff and the threshold at its peak price this means "minimum during peak".
/// </summary>
/// <param name="thresholdPerKwh">Price from which load is held at minimum, $ per kWh.</param>
public sealed class PriceThresholdPolicy(double thresholdPerKwh) : IDemandResponsePolicy
{
    /// <summary>Price from which load is held at minimum, $ per kWh.</summary>
    public double ThresholdPerKwh { get; } = thresholdPerKwh;

    /// <inheritdoc />
    public string Name => "rule";

    /// <inheritdoc />
    public void Decide(DemandResponseEnvironment environment, Span<double> setpointsKw)
    {
        ArgumentNullException.ThrowIfNull(environment);
        (environment.PricePerKwh >= ThresholdPerKwh ? environment.FlexMinKw : environment.FlexDesiredKw).CopyTo(setpointsKw);
    }
}
