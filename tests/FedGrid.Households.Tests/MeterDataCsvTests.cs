using System.Text;
using FedGrid.Households.Data;
using FedGrid.Households.Scenarios;

namespace FedGrid.Households.Tests;

public class MeterDataCsvTests
{
    private static string Day(string header, Func<int, string> row, params string[] households)
    {
        var sb = new StringBuilder(header).Append('\n');
        foreach (string h in households)
            for (int s = 0; s < 96; s++) sb.Append(h).Append(',').Append(row(s)).Append('\n');
        return sb.ToString();
    }

    private static MeterDataProblem Single(string text)
    {
        var e = Assert.Throws<MeterDataException>(() => MeterDataCsv.Parse(text, "meter.csv"));
        Assert.Contains("meter.csv", e.Message);
        return e.Problems[0];
    }

    [Fact]
    public void Reads_slots_base_load_and_occupancy()
    {
        string csv = "# measured at the gateway\n" + Day("household,slot,baseKw,occupied", s => $"{s},{0.25 + s * 0.01},{(s < 32 ? 1 : 0)}", "H01", "H02");
        var d = MeterDataCsv.Parse(csv);
        Assert.Equal(96, d.SlotCount);
        Assert.Null(d.FirstDay);
        Assert.Equal(["H01", "H02"], d.Households.Select(h => h.HouseholdId));
        Assert.Equal(0.25 + 40 * 0.01, d.Households[1].BaseKw[40], 12);
        Assert.True(d.Households[0].Occupied[31]);
        Assert.False(d.Households[0].Occupied[32]);
    }

    [Fact]
    public void Reads_timestamps_and_takes_the_first_day_from_them()
    {
        // 2026-03-07 is a Saturday (checked against System.DateTime).
        string csv = "timestamp,household,baseKw\n" +
            string.Concat(Enumerable.Range(0, 96).Reverse().Select(s => $"2026-03-07T{s / 4:00}:{s % 4 * 15:00},H01,{s * 0.1}\n"));
        var d = MeterDataCsv.Parse(csv);
        Assert.Equal(DayOfWeek.Saturday, d.FirstDay);
        Assert.Equal(9.5, d.Households[0].BaseKw[95], 12);
        Assert.True(d.Households[0].Occupied.IsDefault);
    }

    [Fact]
    public void A_bad_number_names_row_and_column()
    {
        string csv = Day("household,slot,baseKw", s => s == 10 ? "10,abc" : $"{s},0.3", "H01");
        var p = Single(csv);
        Assert.Equal((12, "baseKw"), (p.Row, p.Column)); // header is row 1, slot 0 row 2, slot 10 row 12
        Assert.Contains("'abc'", p.Message);
    }

    [Fact]
    public void Negative_load_is_rejected()
    {
        var p = Single(Day("household,slot,baseKw", s => s == 3 ? "3,-0.2" : $"{s},0.3", "H01"));
        Assert.Equal((5, "baseKw"), (p.Row, p.Column));
        Assert.Contains("≥ 0", p.Message);
    }

    [Fact]
    public void Bad_occupancy_value_is_rejected()
    {
        var p = Single(Day("household,slot,baseKw,occupied", s => s == 0 ? "0,0.3,maybe" : $"{s},0.3,1", "H01"));
        Assert.Equal((2, "occupied"), (p.Row, p.Column));
    }

    [Fact]
    public void Bad_slot_is_rejected()
    {
        var p = Single(Day("household,slot,baseKw", s => s == 5 ? "5.5,0.3" : $"{s},0.3", "H01"));
        Assert.Equal((7, "slot"), (p.Row, p.Column));
        var far = Single("household,slot,baseKw\nH01,35136,0.3\n");
        Assert.Equal((2, "slot"), (far.Row, far.Column));
        Assert.Contains("366 days", far.Message);
    }

    [Fact]
    public void Duplicate_slot_names_both_rows()
    {
        var p = Single(Day("household,slot,baseKw", s => s == 6 ? "5,0.3" : $"{s},0.3", "H01"));
        Assert.Equal((8, "slot"), (p.Row, p.Column));
        Assert.Contains("already at row 7", p.Message);
    }

    [Fact]
    public void Missing_slot_and_partial_days_are_reported()
    {
        string gap = Day("household,slot,baseKw", s => $"{s},0.3", "H01") + string.Concat(Enumerable.Range(0, 96).Where(s => s != 17).Select(s => $"H02,{s},0.4\n"));
        var p = Single(gap);
        Assert.Equal("slot", p.Column);
        Assert.Contains("'H02' has no value for slot 17", p.Message);

        var part = Single("household,slot,baseKw\nH01,0,0.3\nH01,1,0.3\n");
        Assert.Equal((3, "slot"), (part.Row, part.Column));
        Assert.Contains("whole days", part.Message);
    }

    [Fact]
    public void Header_problems_are_reported()
    {
        var unknown = Single("household,slot,baseKw,temperature\n");
        Assert.Equal((1, "4"), (unknown.Row, unknown.Column));
        Assert.Contains("unknown column 'temperature'", unknown.Message);
        var missing = Single("household,slot\nH01,0\n");
        Assert.Equal((1, "baseKw"), (missing.Row, missing.Column));
        var both = Single("household,slot,timestamp,baseKw\n");
        Assert.Equal("slot/timestamp", both.Column);
        var empty = Single("# nothing\n\n");
        Assert.Equal(1, empty.Row);
        var noRows = Single("household,slot,baseKw\n");
        Assert.Contains("no data rows", noRows.Message);
    }

    [Fact]
    public void Field_count_and_timestamps_are_checked()
    {
        var fields = Single("household,slot,baseKw\nH01,0\n");
        Assert.Equal((2, "-"), (fields.Row, fields.Column));
        var quarter = Single("timestamp,household,baseKw\n2026-03-07T00:10,H01,0.3\n");
        Assert.Equal((2, "timestamp"), (quarter.Row, quarter.Column));
        var midnight = Single("timestamp,household,baseKw\n2026-03-07T00:15,H01,0.3\n");
        Assert.Contains("midnight", midnight.Message);
        var format = Single("timestamp,household,baseKw\n07/03/2026 00:00,H01,0.3\n");
        Assert.Equal((2, "timestamp"), (format.Row, format.Column));
    }

    [Fact]
    public void Missing_file_is_reported_with_its_name()
    {
        var e = Assert.Throws<MeterDataException>(() => MeterDataCsv.Load("/nonexistent/meter.csv"));
        Assert.Contains("/nonexistent/meter.csv", e.Message);
        Assert.Contains("file not found", e.Message);
    }

    [Fact]
    public void Several_problems_are_all_listed()
    {
        var e = Assert.Throws<MeterDataException>(() => MeterDataCsv.Parse("household,slot,baseKw\nH01,0,x\nH01,1,y\n", "m.csv"));
        Assert.Equal([2, 3], e.Problems.Select(p => p.Row));
    }

    [Fact]
    public void Measured_data_replace_the_synthetic_base_load()
    {
        var scenario = DefaultScenario.Create(1, days: 1);
        var d = MeterDataCsv.Parse(Day("household,slot,baseKw,occupied", s => $"{s},1.25,0", "H05"));
        var measured = d.ApplyTo(scenario);
        int i = scenario.Households.Select(h => h.Id).ToList().IndexOf("H05");
        Assert.All(measured.Traces[i].BaseKw, v => Assert.Equal(1.25, v));
        Assert.All(measured.Traces[i].Occupied, Assert.False);
        Assert.True(measured.Traces[i - 1].BaseKw.SequenceEqual(scenario.Traces[i - 1].BaseKw));
        Assert.Throws<ArgumentException>(() => MeterDataCsv.Parse(Day("household,slot,baseKw", s => $"{s},1", "H99")).ApplyTo(scenario));
        Assert.Throws<ArgumentException>(() => d.ApplyTo(DefaultScenario.Create(1, days: 2)));
    }
}
