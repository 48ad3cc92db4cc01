using System.Globalization;

namespace FedGrid.Charts;

/// <summary>
/// Tick values of one axis: a step of 1, 2 or 5 times a power of ten, a variant of Heckbert's
/// "Nice numbers for graph labels" (Graphics Gems, 1990): the step is the data range divided by
/// the wanted intervals, rounded to the nearest nice number.
/// </summary>
public sealed record AxisTicks
{
    private AxisTicks(double min, double max, double step, double[] values, int decimals)
    {
        Min = min; Max = max; Step = step; Values = values; Decimals = decimals;
    }

    /// <summary>Lower end of the axis.</summary>
    public double Min { get; }
    /// <summary>Upper end of the axis.</summary>
    public double Max { get; }
    /// <summary>Distance between ticks.</summary>
    public double Step { get; }
    /// <summary>Tick values, ascending, all inside [<see cref="Min"/>, <see cref="Max"/>].</summary>
    public IReadOnlyList<double> Values { get; }
    /// <summary>Decimal places that show the step exactly.</summary>
    public int Decimals { get; }

    /// <summary>Ticks for data in [<paramref name="min"/>, <paramref name="max"/>]; the axis is widened to the outer ticks.</summary>
    /// <param name="min">Smallest data value.</param>
    /// <param name="max">Largest data value.</param>
    /// <param name="targetCount">About how many ticks are wanted (at least 2).</param>
    public static AxisTicks Nice(double min, double max, int targetCount = 6) => Make(min, max, targetCount, widen: true);

    /// <summary>Nice ticks inside a fixed axis range [<paramref name="min"/>, <paramref name="max"/>].</summary>
    /// <param name="min">Lower end of the axis.</param>
    /// <param name="max">Upper end of the axis.</param>
    /// <param name="targetCount">About how many ticks are wanted (at least 2).</param>
    public static AxisTicks Fixed(double min, double max, int targetCount = 6) => Make(min, max, targetCount, widen: false);

    /// <summary>The smallest of 1, 2, 5 (times a power of ten) near <paramref name="value"/>: rounded to the nearest when <paramref name="round"/>, else the next one up.</summary>
    /// <param name="value">A positive finite number.</param>
    /// <param name="round">Round to nearest instead of up.</param>
    public static double NiceNumber(double value, bool round)
    {
        if (!(value > 0) || !double.IsFinite(value)) throw new ArgumentOutOfRangeException(nameof(value), value, "must be positive and finite");
        double exp = Math.Floor(Math.Log10(value));
        double pow = Math.Pow(10, exp);
        double f = value / pow;
        double nf = round
            ? (f < 1.5 ? 1 : f < 3 ? 2 : f < 7 ? 5 : 10)
            : (f <= 1 + 1e-9 ? 1 : f <= 2 + 1e-9 ? 2 : f <= 5 + 1e-9 ? 5 : 10);
        return nf * pow;
    }

    /// <summary>Formats a tick value with <see cref="Decimals"/> places (invariant culture; scientific for very large or small magnitudes).</summary>
    /// <param name="value">A tick value.</param>
    public string Format(double value)
    {
        if (Math.Abs(value) < Step * 1e-9) value = 0; // no "-0.00"
        double mag = Math.Max(Math.Abs(Min), Math.Abs(Max));
        if (mag >= 1e6 || Decimals > 6)
            return value.ToString("0.###E+0", CultureInfo.InvariantCulture);
        return value.ToString("F" + Decimals.ToString(CultureInfo.InvariantCulture), CultureInfo.InvariantCulture);
    }

    private static AxisTicks Make(double min, double max, int targetCount, bool widen)
    {
        if (!double.IsFinite(min) || !double.IsFinite(max)) throw new ArgumentException($"axis range [{min}, {max}] is not finite");
        if (targetCount < 2) throw new ArgumentOutOfRangeException(nameof(targetCount), targetCount, "at least 2 ticks");
        if (max < min) (min, max) = (max, min);
        if (max - min <= Math.Max(Math.Abs(min), Math.Abs(max)) * 1e-12)
        {
            double pad = min == 0 ? 1 : Math.Abs(min) * 0.1;
            min -= pad; max += pad;
        }
        double step = NiceNumber((max - min) / (targetCount - 1), round: true);
        int decimals = Math.Max(0, -(int)Math.Floor(Math.Log10(step)));
        double first = widen ? Math.Floor(min / step + 1e-9) * step : Math.Ceiling(min / step - 1e-9) * step;
        double last = widen ? Math.Ceiling(max / step - 1e-9) * step : Math.Floor(max / step + 1e-9) * step;
        int count = (int)Math.Round((last - first) / step) + 1;
        var values = new double[count];
        for (int i = 0; i < count; i++) { double v = first + i * step; values[i] = decimals < 15 ? Math.Round(v, decimals + 1) : v; }
        return widen
            ? new AxisTicks(values[0], values[^1], step, values, decimals)
            : new AxisTicks(min, max, step, values, decimals);
    }
}
