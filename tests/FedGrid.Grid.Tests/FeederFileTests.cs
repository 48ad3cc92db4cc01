using System.Text;
using FedGrid.Grid.Feeders;

namespace FedGrid.Grid.Tests;

public sealed class FeederFileTests
{
    internal const string SmallFeeder = """
        {
          "format": "fedgrid-feeder",
          "version": 1,
          "name": "small",
          "baseMva": 1,
          "substation": {"bus": "a", "voltagePu": 1.02, "importLimitKw": 900},
          "buses": [
            {"id": "a", "name": "head", "baseKv": 12.47, "vMinPu": 0.95, "vMaxPu": 1.05},
            {"id": "b", "baseKv": 12.47, "loadKw": 300, "loadKvar": 100, "vMinPu": 0.95, "vMaxPu": 1.05},
            {"id": "c", "baseKv": 12.47, "loadKw": 200.5, "loadKvar": 50, "vMinPu": 0.95, "vMaxPu": 1.05}
          ],
          "lines": [
            {"from": "a", "to": "b", "rOhm": 0.5, "xOhm": 0.8, "ampacityA": 200},
            {"from": "b", "to": "c", "rOhm": 0.4, "xOhm": 0.3, "ampacityA": 100}
          ]
        }
        """;

    [Fact]
    public void Parse_reads_every_field_and_defaults()
    {
        Feeder f = FeederFile.Parse(SmallFeeder, "small.json");
        Assert.Equal("small", f.Name);
        Assert.Null(f.Source);
        Assert.Equal(1.0, f.BaseMva);
        Assert.Equal(new Substation("a", 1.02, 900), f.Substation);
        Assert.Equal(new Bus("a", "head", 12.47, 0, 0, 0.95, 1.05), f.Buses[0]);
        Assert.Equal(new Bus("b", "b", 12.47, 300, 100, 0.95, 1.05), f.Buses[1]); // name defaults to id
        Assert.Equal(new Line("b", "c", 0.4, 0.3, 100), f.Lines[1]);
        // Per unit inside: 300 kW on a 1 MVA base is 0.3 pu.
        Assert.Equal(0.3, f.Network.LoadP[1], 12);
    }

    [Fact]
    public void Write_then_parse_round_trips_exactly()
    {
        Feeder original = FeederFile.Load(RepoPaths.Sample("baran-wu-33.json"));
        string text = FeederFile.ToJson(original);
        Feeder back = FeederFile.Parse(text, "round-trip.json");
        Assert.Equal(original.Name, back.Name);
        Assert.Equal(original.Source, back.Source);
        Assert.Equal(original.Notes, back.Notes);
        Assert.Equal(original.BaseMva, back.BaseMva);
        Assert.Equal(original.Substation, back.Substation);
        Assert.Equal(original.Buses, back.Buses);
        Assert.Equal(original.Lines, back.Lines);
        // And writing again gives the same bytes.
        Assert.Equal(text, FeederFile.ToJson(back));
    }

    [Fact]
    public void Write_to_path_and_load_round_trips_generated_feeder()
    {
        Feeder original = FeederGenerator.Generate(120, seed: 5);
        string path = Path.Combine(Path.GetTempPath(), $"fedgrid-rt-{Guid.NewGuid():N}.json");
        try
        {
            FeederFile.Write(original, path);
            Feeder back = FeederFile.Load(path);
            Assert.Equal(original.Buses, back.Buses);
            Assert.Equal(original.Lines, back.Lines); // doubles written in round-trip form
            Assert.StartsWith("{", File.ReadAllText(path, Encoding.UTF8));
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void Sample_file_matches_the_published_table()
    {
        // The sample must carry exactly the line and load data of the Baran & Wu (1989) table (CSV fixture).
        Feeder f = FeederFile.Load(RepoPaths.Sample("baran-wu-33.json"));
        Assert.Contains("Baran & Wu", f.Source);
        Assert.Contains("1989", f.Source);
        Assert.Contains(f.Notes, n => n.Contains("not in the published case", StringComparison.Ordinal));
        string[] rows = File.ReadAllLines(RepoPaths.Fixture("baran-wu-33.csv"))
            .Where(l => !l.StartsWith('#') && !l.StartsWith("from_bus", StringComparison.Ordinal) && l.Length > 0).ToArray();
        Assert.Equal(32, rows.Length);
        Assert.Equal(33, f.Buses.Count);
        for (int k = 0; k < rows.Length; k++)
        {
            string[] c = rows[k].Split(',');
            var inv = System.Globalization.CultureInfo.InvariantCulture;
            Line l = f.Lines[k];
            Assert.Equal((c[0], c[1]), (l.From, l.To));
            Assert.Equal(double.Parse(c[2], inv), l.ROhm);
            Assert.Equal(double.Parse(c[3], inv), l.XOhm);
            Bus b = f.Buses[f.IndexOf(c[1])];
            Assert.Equal(double.Parse(c[4], inv), b.LoadPkW);
            Assert.Equal(double.Parse(c[5], inv), b.LoadQkvar);
            Assert.Equal(12.66, b.BaseKv);
        }
    }

    [Fact]
    public void Load_of_missing_file_is_a_validation_error_naming_the_file()
    {
        string path = Path.Combine(Path.GetTempPath(), "fedgrid-no-such-feeder.json");
        var e = Assert.Throws<FeederValidationException>(() => FeederFile.Load(path));
        Assert.Equal(path, e.Problems[0].Location);
        Assert.Contains("not found", e.Problems[0].Message);
    }
}
