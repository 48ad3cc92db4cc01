using System.Text;
using System.Text.Json.Nodes;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Tariffs;

namespace FedGrid.Households.Tests;

public class ScenarioFileTests
{
    private static string Text(Scenario s, string feeder = ScenarioFile.BuiltInDemoFeeder)
    {
        using var ms = new MemoryStream();
        ScenarioFile.Write(s, feeder, ms);
        return Encoding.UTF8.GetString(ms.ToArray());
    }

    private static ScenarioProblem Problem(string json)
    {
        var e = Assert.Throws<ScenarioFileException>(() => ScenarioFile.Parse(json, "s.json"));
        return e.Problems[0];
    }

    private static string Edit(Action<JsonNode> change)
    {
        JsonNode node = JsonNode.Parse(Text(DefaultScenario.Create(4, 1)))!;
        change(node);
        return node.ToJsonString();
    }

    [Fact]
    public void Default_scenario_round_trips_exactly()
    {
        Scenario a = DefaultScenario.Create(17, 3);
        Scenario b = ScenarioFile.Parse(Text(a));
        Assert.Equal(a.Households.Length, b.Households.Length);
        for (int i = 0; i < a.Households.Length; i++)
        {
            Household x = a.Households[i], y = b.Households[i];
            Assert.Equal((x.Id, x.BusId, x.BaseLoad, x.PowerFactor, x.Occupancy), (y.Id, y.BusId, y.BaseLoad, y.PowerFactor, y.Occupancy));
            Assert.True(x.Appliances.SequenceEqual(y.Appliances));
            Assert.True(a.Traces[i].BaseKw.SequenceEqual(b.Traces[i].BaseKw));
            Assert.True(a.Traces[i].Sessions.SequenceEqual(b.Traces[i].Sessions));
        }
        Assert.Equal(a.SlotCount, b.SlotCount);
        for (int t = 0; t < a.SlotCount; t++) Assert.Equal(a.Tariff.PriceAt(t), b.Tariff.PriceAt(t));
        Assert.True(a.FixedLoads.SequenceEqual(b.FixedLoads));
        Assert.Equal(a.Feeder.Buses, b.Feeder.Buses);
    }

    [Fact]
    public void Real_time_tariff_round_trips()
    {
        Scenario a = DefaultScenario.Create(2, 2);
        a = a with { Tariff = RealTimeTariff.Generate("rt", new RealTimePriceModel(), a.SlotCount, 99) };
        Scenario b = ScenarioFile.Parse(Text(a));
        var rt = Assert.IsType<RealTimeTariff>(b.Tariff);
        Assert.True(((RealTimeTariff)a.Tariff).Prices.SequenceEqual(rt.Prices));
    }

    [Fact]
    public void Unknown_and_mistyped_fields_are_named_by_path()
    {
        var p = Problem(Edit(n => n["households"]![3]!["appliances"]![0]!["colour"] = "red"));
        Assert.Equal("s.json: $.households[3].appliances[0].colour", p.Location);
        p = Problem(Edit(n => n["households"]![0]!["powerFactor"] = "high"));
        Assert.Equal("s.json: $.households[0].powerFactor", p.Location);
        Assert.Contains("expected a number", p.Message);
        p = Problem(Edit(n => n["households"]![1]!["appliances"]![0]!["kind"] = "battery"));
        Assert.Equal("s.json: $.households[1].appliances[0].kind", p.Location);
        p = Problem(Edit(n => n["households"]![2]!["occupancy"]!["wake"] = "6:30"));
        Assert.Equal("s.json: $.households[2].occupancy.wake", p.Location);
        p = Problem(Edit(n => n["tariff"]!["weekday"]![0]!["price"] = -1));
        Assert.Equal("s.json: $.tariff.weekday[0].price", p.Location);
        p = Problem(Edit(n => n["days"] = 2.5));
        Assert.Equal("s.json: $.days", p.Location);
        p = Problem(Edit(n => n.AsObject().Remove("tariff")));
        Assert.Equal(("s.json: $.tariff", "required field is missing"), (p.Location, p.Message));
    }

    [Fact]
    public void Content_errors_name_the_household()
    {
        var p = Problem(Edit(n => n["households"]![5]!["bus"] = "B99"));
        Assert.Contains("bus 'B99'", p.Message);
        Assert.Contains("'H06'", p.Message);
        p = Problem(Edit(n => n["tariff"]!["weekday"]![0]!["end"] = "17:00"));
        Assert.Contains("overlaps", p.Message);
        p = Problem(Edit(n => n["feeder"] = "builtin:elsewhere"));
        Assert.Equal("s.json: $.feeder", p.Location);
        p = Problem(Edit(n => n["feeder"] = "feeders/x.json"));
        Assert.Contains("no feeder-file loader", p.Message);
    }

    [Fact]
    public void Malformed_json_and_missing_files_are_reported()
    {
        var p = Problem("{\n  \"format\": \"fedgrid-scenario\",\n  oops\n}");
        Assert.StartsWith("s.json: line 3", p.Location);
        var e = Assert.Throws<ScenarioFileException>(() => ScenarioFile.Load("/nonexistent/s.json"));
        Assert.Contains("file not found", e.Message);
        Assert.Contains("$.format", Problem(Edit(n => n["format"] = "other")).Location);
    }

    [Fact]
    public void Feeder_files_go_through_the_given_loader_and_meter_data_replace_base_load()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-scn-" + Guid.NewGuid().ToString("N"));
        Directory.CreateDirectory(dir);
        try
        {
            var csv = new StringBuilder("household,slot,baseKw\n");
            for (int t = 0; t < 96; t++) csv.Append($"H02,{t},0.75\n");
            File.WriteAllText(Path.Combine(dir, "meter.csv"), csv.ToString());
            JsonNode node = JsonNode.Parse(Text(DefaultScenario.Create(4, 1), "feeder.json"))!;
            node["meterData"] = "meter.csv";
            File.WriteAllText(Path.Combine(dir, "s.json"), node.ToJsonString());
            string? asked = null;
            Scenario s = ScenarioFile.Load(Path.Combine(dir, "s.json"), path => { asked = path; return DefaultScenario.CreateFeeder(); });
            Assert.Equal(Path.Combine(dir, "feeder.json"), asked);
            Assert.All(s.Traces[1].BaseKw, v => Assert.Equal(0.75, v));
        }
        finally { Directory.Delete(dir, true); }
    }
}
