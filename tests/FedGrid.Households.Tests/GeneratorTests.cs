using FedGrid.Households.Data;
using FedGrid.Households.Scenarios;

namespace FedGrid.Households.Tests;

public class GeneratorTests
{
    private static readonly SlotCalendar Monday = new(DayOfWeek.Monday);

    [Fact]
    public void Same_seed_same_traces_other_seed_other_traces()
    {
        var hs = DefaultScenario.CreateHouseholds(42);
        var a = SyntheticData.Generate(hs, 7, Monday, 42);
        var b = SyntheticData.Generate(DefaultScenario.CreateHouseholds(42), 7, Monday, 42);
        var c = SyntheticData.Generate(hs, 7, Monday, 43);
        for (int i = 0; i < hs.Length; i++)
        {
            Assert.True(a[i].BaseKw.SequenceEqual(b[i].BaseKw));
            Assert.True(a[i].Occupied.SequenceEqual(b[i].Occupied));
            Assert.True(a[i].HotWaterLitres.SequenceEqual(b[i].HotWaterLitres));
            Assert.True(a[i].Sessions.SequenceEqual(b[i].Sessions));
            Assert.False(a[i].BaseKw.SequenceEqual(c[i].BaseKw));
        }
        Assert.Equal(hs.Select(h => (h.BaseLoad, h.Occupancy, h.PowerFactor)), DefaultScenario.CreateHouseholds(42).Select(h => (h.BaseLoad, h.Occupancy, h.PowerFactor)));
        Assert.NotEqual(hs.Select(h => h.BaseLoad), DefaultScenario.CreateHouseholds(43).Select(h => h.BaseLoad));
    }

    [Fact]
    public void Events_happen_only_when_someone_is_home()
    {
        var hs = DefaultScenario.CreateHouseholds(7);
        var traces = SyntheticData.Generate(hs, 14, Monday, 7);
        int sessions = 0;
        for (int i = 0; i < hs.Length; i++)
        {
            var t = traces[i];
            Assert.Equal(14 * 96, t.SlotCount);
            for (int s = 0; s < t.SlotCount; s++)
            {
                if (t.HotWaterLitres[s] > 0) Assert.True(t.Occupied[s], $"{t.HouseholdId}: draw while away at slot {s}");
                Assert.True(t.BaseKw[s] >= 0);
            }
            foreach (var cs in t.Sessions)
            {
                sessions++;
                Assert.True(cs.DeadlineSlot > cs.ArrivalSlot);
                Assert.True(t.Occupied[Math.Min(cs.ArrivalSlot, t.SlotCount - 1)] || !t.Occupied[cs.ArrivalSlot - 1]);
                Assert.InRange(cs.EnergyKwh, 2, 14);
            }
            if (hs[i].Deferrable is null) Assert.Empty(t.Sessions);
            if (hs[i].Thermal is null) Assert.All(t.HotWaterLitres, v => Assert.Equal(0, v));
        }
        Assert.True(sessions > 50);
    }

    [Fact]
    public void Load_is_higher_at_home_in_the_evening_than_away_at_midday()
    {
        var hs = DefaultScenario.CreateHouseholds(11);
        var traces = SyntheticData.Generate(hs, 28, Monday, 11);
        double away = 0, evening = 0;
        int na = 0, ne = 0;
        for (int i = 0; i < hs.Length; i++)
            for (int s = 0; s < traces[i].SlotCount; s++)
            {
                int sod = s % 96;
                if (!traces[i].Occupied[s] && sod is >= 40 and < 60) { away += traces[i].BaseKw[s]; na++; }
                if (traces[i].Occupied[s] && sod is >= 74 and < 80) { evening += traces[i].BaseKw[s]; ne++; }
            }
        Assert.True(na > 1000 && ne > 1000);
        Assert.True(evening / ne > 3 * (away / na), $"evening {evening / ne:0.00} kW vs away {away / na:0.00} kW");
    }

    [Fact]
    public void Weekdays_empty_the_houses_weekends_mostly_do_not()
    {
        var hs = DefaultScenario.CreateHouseholds(5);
        var traces = SyntheticData.Generate(hs, 28, Monday, 5);
        int weekdayAway = 0, weekendAway = 0, weekdaySlots = 0, weekendSlots = 0;
        foreach (var t in traces)
            for (int s = 0; s < t.SlotCount; s++)
            {
                if (s % 96 is < 44 or >= 56) continue; // 11:00-14:00
                if (Monday.IsWeekend(s)) { weekendSlots++; if (!t.Occupied[s]) weekendAway++; }
                else { weekdaySlots++; if (!t.Occupied[s]) weekdayAway++; }
            }
        // Weekdays: away unless staying home (10-30 %); weekends: out with probability 0.5 for part of the window.
        Assert.InRange(weekdayAway / (double)weekdaySlots, 0.6, 0.95);
        Assert.InRange(weekendAway / (double)weekendSlots, 0.05, 0.5);
    }
}
