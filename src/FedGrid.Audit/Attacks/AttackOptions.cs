namespace FedGrid.Audit.Attacks;

/// <summary>Which declared side information the attacks may use.</summary>
public sealed record AttackOptions
{
    /// <summary>Use the public priors (mean profiles) to calibrate and to split aggregates; without them the attacks use a flat, uninformative prior.</summary>
    public bool UsePriors { get; init; } = true;

    /// <summary>Use the substation meter (total feeder import) when the view has it.</summary>
    public bool UseSubstationMeter { get; init; } = true;

    /// <summary>Assumed error of the substation-meter model (unmodelled losses, metering), one standard deviation, kW.</summary>
    public double SubstationMeterStdKw { get; init; } = 0.1;

    /// <summary>Spread of the flat prior used when <see cref="UsePriors"/> is off, kW.</summary>
    public double FlatPriorStdKw { get; init; } = 10;
}

/// <summary>The prior an attack may use under the declared side information (shared by every attack, including ones supplied from outside).</summary>
public static class AttackPrior
{
    /// <summary>Prior mean of a quantity per slot, or zeros without priors.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="household">Household index.</param>
    /// <param name="q">The quantity.</param>
    /// <returns>The mean, kW per slot.</returns>
    public static double[] Mean(AttackerView view, AttackOptions options, int household, Quantity q)
    {
        if (options.UsePriors && view.Households[household].Priors.TryGetValue(q, out QuantityPrior? p)) return p.MeanKw;
        return new double[view.SlotCount];
    }

    /// <summary>Prior spread of a quantity (one standard deviation), or the flat prior's spread without priors.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="household">Household index.</param>
    /// <param name="q">The quantity.</param>
    /// <returns>The spread, kW.</returns>
    public static double Std(AttackerView view, AttackOptions options, int household, Quantity q)
    {
        if (options.UsePriors && view.Households[household].Priors.TryGetValue(q, out QuantityPrior? p)) return Math.Max(p.StdKw, 1e-6);
        return options.FlatPriorStdKw;
    }

    /// <summary>Household total used for splitting bus aggregates: the prior total, or 1 (equal shares) without priors.</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="household">Household index.</param>
    /// <returns>The total, kW per slot.</returns>
    public static double[] Total(AttackerView view, AttackOptions options, int household)
    {
        if (options.UsePriors) return view.Households[household].PriorTotalKw;
        var ones = new double[view.SlotCount];
        Array.Fill(ones, 1.0);
        return ones;
    }

    /// <summary>A reconstruction that is the prior everywhere (variance = prior spread²).</summary>
    /// <param name="view">The attacker's view.</param>
    /// <param name="options">Side information in use.</param>
    /// <param name="household">Household index.</param>
    /// <param name="q">The quantity.</param>
    /// <returns>Estimate and variance per slot.</returns>
    public static (double[] Estimate, double[] Variance) Fallback(AttackerView view, AttackOptions options, int household, Quantity q)
    {
        double[] est = (double[])Mean(view, options, household, q).Clone();
        double s = Std(view, options, household, q);
        var v = new double[view.SlotCount];
        Array.Fill(v, s * s);
        return (est, v);
    }

    /// <summary>Smallest variance an attack may claim (keeps inverse-variance weights finite).</summary>
    public const double TinyVariance = 1e-18;
}
