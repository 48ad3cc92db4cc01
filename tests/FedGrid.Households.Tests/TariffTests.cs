using FedGrid.Households.Scenarios;
using FedGrid.Households.Tariffs;

namespace FedGrid.Households.Tests;

public class TariffTests
{
    private static readonly SlotCalendar Monday = new(DayOfWeek.Monday);

    private static int At(int day, string clock) => day * 96 + SlotCalendar.ParseClock(clock);

    [Fact]
    public void Default_time_of_use_periods_switch_on_the_quarter_hour()
    {
        var tou = DefaultScenario.CreateTariff(Monday);
        Assert.Equal(0.10, tou.PriceAt(At(0, "06:45")));
        Assert.Equal("off-peak", tou.PeriodAt(At(0, "06:45")));
        Assert.Equal(0.18, tou.PriceAt(At(0, "07:00")));
        Assert.Equal(0.18, tou.PriceAt(At(2, "15:45")));
        Assert.Equal(0.38, tou.PriceAt(At(2, "16:00")));
        Assert.Equal("peak", tou.PeriodAt(At(4, "21:45")));
        Assert.Equal(0.10, tou.PriceAt(At(4, "22:00")));
        Assert.Equal(0.38, tou.HighestPrice);
    }

    [Fact]
    public void Weekends_have_no_peak()
    {
        var tou = DefaultScenario.CreateTariff(Monday);
        Assert.True(Monday.IsWeekend(At(5, "17:00")));
        Assert.Equal(0.18, tou.PriceAt(At(5, "17:00"))); // Saturday
        Assert.Equal(0.18, tou.PriceAt(At(6, "21:45"))); // Sunday
        Assert.Equal(0.38, tou.PriceAt(At(7, "17:00"))); // next Monday
        var fromSunday = DefaultScenario.CreateTariff(new SlotCalendar(DayOfWeek.Sunday));
        Assert.Equal(0.18, fromSunday.PriceAt(At(0, "17:00")));
        Assert.Equal(0.38, fromSunday.PriceAt(At(1, "17:00")));
    }

    [Fact]
    public void Overlapping_or_out_of_day_periods_are_rejected()
    {
        var e = Assert.Throws<ArgumentException>(() => new TimeOfUseTariff("t", Monday, "base", 0.1,
            [new TouPeriod("a", 10, 20, 0.2), new TouPeriod("b", 19, 30, 0.3)], []));
        Assert.Contains("overlaps", e.Message);
        Assert.Contains("04:45", e.Message);
        Assert.Throws<ArgumentException>(() => new TimeOfUseTariff("t", Monday, "base", 0.1, [new TouPeriod("a", 90, 97, 0.2)], []));
        Assert.Throws<ArgumentException>(() => new TimeOfUseTariff("t", Monday, "base", 0.1, [], [new TouPeriod("a", 10, 10, 0.2)]));
        Assert.Throws<ArgumentException>(() => new TimeOfUseTariff("t", Monday, "base", 0.1, [new TouPeriod("a", 1, 2, -0.2)], []));
    }

    [Fact]
    public void Clock_times_are_quarter_hours()
    {
        Assert.Equal(0, SlotCalendar.ParseClock("00:00"));
        Assert.Equal(66, SlotCalendar.ParseClock("16:30"));
        Assert.Equal(96, SlotCalendar.ParseClock("24:00"));
        Assert.Throws<FormatException>(() => SlotCalendar.ParseClock("16:10"));
        Assert.Throws<FormatException>(() => SlotCalendar.ParseClock("25:00"));
        Assert.Throws<FormatException>(() => SlotCalendar.ParseClock("7:00"));
        Assert.Equal("16:30", SlotCalendar.FormatClock(66));
    }

    [Fact]
    public void Real_time_prices_are_reproducible_per_seed_and_differ_across_seeds()
    {
        var model = new RealTimePriceModel();
        var a = RealTimeTariff.Generate("rt", model, 96 * 7, 5);
        var b = RealTimeTariff.Generate("rt", model, 96 * 7, 5);
        var c = RealTimeTariff.Generate("rt", model, 96 * 7, 6);
        Assert.True(a.Prices.SequenceEqual(b.Prices));
        Assert.False(a.Prices.SequenceEqual(c.Prices));
        Assert.All(a.Prices, p => Assert.True(p >= model.FloorPerKwh));
        Assert.Throws<ArgumentOutOfRangeException>(() => a.PriceAt(96 * 7));
    }

    [Fact]
    public void Without_noise_or_spikes_the_price_is_the_daily_shape()
    {
        var quiet = new RealTimePriceModel(Volatility: 0, SpikeProbability: 0);
        var t = RealTimeTariff.Generate("rt", quiet, 192, 1);
        for (int s = 0; s < 192; s++) Assert.Equal(quiet.Shape(s % 96), t.PriceAt(s), 12);
        // Raised-cosine humps: full height at their centres, none at night.
        Assert.Equal(0.12 + 0.14, quiet.Shape(SlotCalendar.ParseClock("19:00")), 12);
        Assert.Equal(0.12 + 0.06, quiet.Shape(SlotCalendar.ParseClock("08:00")), 12);
        Assert.Equal(0.12, quiet.Shape(SlotCalendar.ParseClock("02:00")), 12);
    }

    [Fact]
    public void Noise_reverts_to_the_shape_and_spikes_appear_at_their_rate()
    {
        var noisy = new RealTimePriceModel(SpikeProbability: 0);
        var t = RealTimeTariff.Generate("rt", noisy, 96 * 200, 3);
        double mean = 0, max = 0;
        for (int s = 0; s < t.Prices.Length; s++)
        {
            mean += t.Prices[s] - noisy.Shape(s % 96);
            max = Math.Max(max, Math.Abs(t.Prices[s] - noisy.Shape(s % 96)));
        }
        mean /= t.Prices.Length;
        // Stationary AR(1) deviation: mean 0, sd = 0.01/sqrt(1 − 0.81) ≈ 0.023 $/kWh; the sample mean of 19 200
        // strongly correlated draws stays well inside ±0.005.
        Assert.InRange(mean, -0.005, 0.005);
        Assert.InRange(max, 0.03, 0.2);

        var spiky = new RealTimePriceModel(Volatility: 0, SpikeProbability: 0.01, SpikeMeanPerKwh: 1.0);
        var ts = RealTimeTariff.Generate("rt", spiky, 96 * 100, 3);
        int starts = 0;
        for (int s = 1; s < ts.Prices.Length; s++)
            if (ts.Prices[s] - spiky.Shape(s % 96) > 0.6 * (ts.Prices[s - 1] - spiky.Shape((s - 1) % 96)) + 1e-9) starts++;
        // 9 600 slots × 1 % ≈ 96 spike starts (binomial sd ≈ 10).
        Assert.InRange(starts, 60, 135);
    }
}
