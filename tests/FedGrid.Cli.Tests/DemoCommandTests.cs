using System.Text.Json;
using FedGrid.Cli.Commands;

namespace FedGrid.Cli.Tests;

public class DemoCommandTests
{
    private static (int Code, string Out, string Err, string Dir) Run(int days, bool json, ulong seed = 20261201)
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-demo-test-" + Guid.NewGuid().ToString("N"));
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int code = DemoCommand.Run(new DemoOptions(days, seed, dir, json), stdout, stderr);
        return (code, stdout.ToString(), stderr.ToString(), dir);
    }

    [Fact]
    public void Json_summary_has_both_baselines_with_the_contract_fields()
    {
        var (code, output, err, dir) = Run(2, json: true);
        try
        {
            Assert.Equal(0, code);
            using var doc = JsonDocument.Parse(output); // stdout holds only the JSON
            var root = doc.RootElement;
            Assert.Equal(2, root.GetProperty("days").GetInt32());
            Assert.Equal(32, root.GetProperty("households").GetInt32());
            foreach (string policy in (string[])["noControl", "rule"])
            {
                var p = root.GetProperty(policy);
                foreach (string field in (string[])["dailyCost", "peakKw", "violationSlots", "bill", "discomfort", "lossesKwh", "minVoltagePu"])
                    Assert.Equal(JsonValueKind.Number, p.GetProperty(field).ValueKind);
                Assert.Equal((p.GetProperty("bill").GetDouble() + p.GetProperty("discomfort").GetDouble()) / 2, p.GetProperty("dailyCost").GetDouble(), 3);
                Assert.InRange(p.GetProperty("minVoltagePu").GetDouble(), 0.9, 1.02);
            }
            Assert.True(root.GetProperty("rule").GetProperty("peakKw").GetDouble() < root.GetProperty("noControl").GetProperty("peakKw").GetDouble());
            Assert.Contains("demo: noControl: day 2/2", err);
            Assert.Equal(output.Trim(), File.ReadAllText(Path.Combine(dir, "summary.json")).Trim());
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Run_folder_holds_slots_csv_and_a_png()
    {
        var (code, output, _, dir) = Run(1, json: false);
        try
        {
            Assert.Equal(0, code);
            Assert.Contains(dir, output);
            Assert.Contains("Cautions:", output);
            Assert.Contains("noControl", output);
            string[] lines = File.ReadAllLines(Path.Combine(dir, "slots.csv"));
            Assert.Equal(1 + 96, lines.Length);
            Assert.StartsWith("slot,day,time,weekend,pricePerKwh,noControl.householdsKw", lines[0]);
            Assert.Equal(lines[0].Split(',').Length, lines[50].Split(',').Length);
            byte[] png = File.ReadAllBytes(Path.Combine(dir, "feeder-load.png"));
            // PNG signature (ISO/IEC 15948 / W3C PNG, section 5.2).
            Assert.Equal(new byte[] { 0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A }, png[..8]);
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Same_seed_gives_the_same_summary()
    {
        var a = Run(1, json: true, seed: 5);
        var b = Run(1, json: true, seed: 5);
        var c = Run(1, json: true, seed: 6);
        try
        {
            static string Strip(string json, string dir) => json.Replace(dir, "");
            Assert.Equal(Strip(a.Out, a.Dir), Strip(b.Out, b.Dir));
            Assert.NotEqual(Strip(a.Out, a.Dir), Strip(c.Out, c.Dir));
        }
        finally
        {
            foreach (string d in (string[])[a.Dir, b.Dir, c.Dir]) Directory.Delete(d, true);
        }
    }

    [Fact]
    public void Bad_days_is_a_user_error()
    {
        var e = Assert.Throws<UserInputException>(() => DemoCommand.Run(new DemoOptions(0, 1, null, true), TextWriter.Null, TextWriter.Null));
        Assert.Contains("--days", e.Message);
    }

    [Fact]
    public void Demo_is_registered_as_a_verb()
    {
        Assert.Contains(Verbs.All(), c => c.Name == "demo");
    }
}

public class DemoScenarioFileTests
{
    private static string Root()
    {
        for (var dir = new DirectoryInfo(AppContext.BaseDirectory); dir is not null; dir = dir.Parent)
            if (File.Exists(Path.Combine(dir.FullName, "FedGrid.sln"))) return dir.FullName;
        throw new InvalidOperationException("repository root (FedGrid.sln) not found");
    }

    private static string Summary(DemoOptions o)
    {
        var stdout = new StringWriter();
        Assert.Equal(0, DemoCommand.Run(o, stdout, TextWriter.Null));
        using var doc = JsonDocument.Parse(stdout.ToString());
        return doc.RootElement.GetProperty("noControl").GetRawText() + doc.RootElement.GetProperty("rule").GetRawText();
    }

    [Fact]
    public void A_saved_default_scenario_runs_to_the_same_figures()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-demo-scn-" + Guid.NewGuid().ToString("N"));
        Directory.CreateDirectory(dir);
        try
        {
            string file = Path.Combine(dir, "s.json");
            Assert.Equal(0, DemoCommand.Run(new DemoOptions(2, 8, null, false, SaveScenarioPath: file), TextWriter.Null, TextWriter.Null));
            string fromFile = Summary(new DemoOptions(null, null, Path.Combine(dir, "a"), true, ScenarioPath: file));
            string builtIn = Summary(new DemoOptions(2, 8, Path.Combine(dir, "b"), true));
            Assert.Equal(builtIn, fromFile);
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void The_sample_scenario_file_is_the_default_week()
    {
        string sample = Path.Combine(Root(), "samples", "scenarios", "default-week.json");
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-demo-sample-" + Guid.NewGuid().ToString("N"));
        try
        {
            string file = Path.Combine(dir, "s.json");
            Directory.CreateDirectory(dir);
            DemoCommand.Run(new DemoOptions(null, null, null, false, SaveScenarioPath: file), TextWriter.Null, TextWriter.Null);
            Assert.Equal(File.ReadAllText(file), File.ReadAllText(sample)); // regenerate with: fedgrid demo --save-scenario samples/scenarios/default-week.json
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Scenario_file_errors_are_user_errors()
    {
        var e = Assert.Throws<UserInputException>(() => DemoCommand.Run(new DemoOptions(3, null, null, true, ScenarioPath: "x.json"), TextWriter.Null, TextWriter.Null));
        Assert.Contains("--scenario takes days and seed from the file", e.Message);
        e = Assert.Throws<UserInputException>(() => DemoCommand.Run(new DemoOptions(null, null, null, true, ScenarioPath: "/nonexistent/x.json"), TextWriter.Null, TextWriter.Null));
        Assert.Contains("/nonexistent/x.json: file not found", e.Message);
    }
}
