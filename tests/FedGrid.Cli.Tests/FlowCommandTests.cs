using System.Text.Json;

namespace FedGrid.Cli.Tests;

public sealed class FlowCommandTests
{
    private static string Sample => Path.Combine(CliProcess.RepoRoot, "samples", "feeders", "baran-wu-33.json");

    [Fact]
    public void Json_output_has_the_contract_fields()
    {
        var (code, stdout, stderr) = CliProcess.Run("flow", "--feeder", Sample, "--json");
        Assert.True(code == 0, stderr);
        using JsonDocument doc = JsonDocument.Parse(stdout); // stdout is only JSON
        JsonElement root = doc.RootElement;
        Assert.True(root.GetProperty("converged").GetBoolean());
        Assert.True(root.GetProperty("iterations").GetInt32() > 0);
        // Baran & Wu (1989) base case: 202.7 kW loss, 0.9131 pu at bus 18 (published, from memory).
        Assert.InRange(root.GetProperty("totalLossKw").GetDouble(), 202.2, 203.2);
        Assert.InRange(root.GetProperty("minVoltagePu").GetDouble(), 0.9126, 0.9136);
        Assert.Equal("18", root.GetProperty("minVoltageBus").GetString());
        // Import = load (3715 kW in the published table) + loss.
        Assert.Equal(3715 + root.GetProperty("totalLossKw").GetDouble(), root.GetProperty("substationImportKw").GetDouble(), 6);

        JsonElement[] violations = root.GetProperty("violations").EnumerateArray().ToArray();
        Assert.NotEmpty(violations);
        JsonElement v18 = violations.Single(v => v.GetProperty("element").GetString() == "18");
        Assert.Equal("underVoltage", v18.GetProperty("kind").GetString());
        Assert.Equal(root.GetProperty("minVoltagePu").GetDouble(), v18.GetProperty("value").GetDouble());
        Assert.Equal(0.95, v18.GetProperty("limit").GetDouble());
        Assert.Equal("pu", v18.GetProperty("unit").GetString());

        JsonElement[] buses = root.GetProperty("buses").EnumerateArray().ToArray();
        Assert.Equal(33, buses.Length);
        Assert.Equal(("1", 1.0), (buses[0].GetProperty("id").GetString(), buses[0].GetProperty("voltagePu").GetDouble()));
        Assert.Equal(32, root.GetProperty("lines").GetArrayLength());
        JsonElement line = root.GetProperty("lines")[0];
        foreach (string field in new[] { "from", "to", "currentA", "ampacityA", "loadingPercent", "pKw", "qKvar" })
            Assert.True(line.TryGetProperty(field, out _), $"line field {field} missing");
    }

    [Fact]
    public void Table_output_lists_buses_lines_violations_and_the_caution()
    {
        var (code, stdout, _) = CliProcess.Run("flow", "--feeder", Sample);
        Assert.Equal(0, code);
        Assert.Contains("Minimum voltage 0.91309 pu at bus 18", stdout);
        Assert.Contains("Buses", stdout);
        Assert.Contains("ampacity A", stdout);
        Assert.Contains("Violations: 21", stdout); // 21 buses below 0.95 pu in the base case
        Assert.Contains("not for operating equipment", stdout);
    }

    [Fact]
    public void Bad_file_gives_location_and_exit_code_2()
    {
        string path = Path.Combine(Path.GetTempPath(), $"fedgrid-cli-bad-{Guid.NewGuid():N}.json");
        string text = File.ReadAllText(Sample).Replace("{\"from\": \"17\", \"to\": \"18\"", "{\"from\": \"17\", \"to\": \"81\"", StringComparison.Ordinal);
        Assert.Contains("\"81\"", text);
        File.WriteAllText(path, text);
        try
        {
            var (code, stdout, stderr) = CliProcess.Run("flow", "--feeder", path, "--json");
            Assert.Equal(2, code);
            Assert.Equal("", stdout);
            Assert.Contains($"{path}: $.lines[16].to: unknown bus '81'", stderr);
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void Malformed_and_missing_files_exit_2()
    {
        string path = Path.Combine(Path.GetTempPath(), $"fedgrid-cli-malformed-{Guid.NewGuid():N}.json");
        File.WriteAllText(path, "{\n  \"format\": \"fedgrid-feeder\",\n  \"version\": 1,,\n}");
        try
        {
            var (code, _, stderr) = CliProcess.Run("flow", "--feeder", path);
            Assert.Equal(2, code);
            Assert.Contains($"{path}: line 3, byte", stderr);
            Assert.Contains("malformed JSON", stderr);
        }
        finally
        {
            File.Delete(path);
        }
        var (code2, _, stderr2) = CliProcess.Run("flow", "--feeder", path);
        Assert.Equal(2, code2);
        Assert.Contains("file not found", stderr2);
    }

    [Fact]
    public void Non_converging_feeder_is_reported_with_exit_code_1()
    {
        // 5 MW over 50 ohm at 12.47 kV exceeds the maximum transferable V²/(4R) ≈ 0.78 MW: no solution.
        string path = Path.Combine(Path.GetTempPath(), $"fedgrid-cli-diverge-{Guid.NewGuid():N}.json");
        File.WriteAllText(path, """
            {"format": "fedgrid-feeder", "version": 1, "name": "too-far", "baseMva": 1,
             "substation": {"bus": "s", "voltagePu": 1.0, "importLimitKw": 10000},
             "buses": [{"id": "s", "baseKv": 12.47, "vMinPu": 0.95, "vMaxPu": 1.05},
                       {"id": "far", "baseKv": 12.47, "loadKw": 5000, "loadKvar": 1000, "vMinPu": 0.95, "vMaxPu": 1.05}],
             "lines": [{"from": "s", "to": "far", "rOhm": 50, "xOhm": 10, "ampacityA": 400}]}
            """);
        try
        {
            var (code, stdout, _) = CliProcess.Run("flow", "--feeder", path, "--json");
            Assert.Equal(1, code);
            using JsonDocument doc = JsonDocument.Parse(stdout);
            Assert.False(doc.RootElement.GetProperty("converged").GetBoolean());
        }
        finally
        {
            File.Delete(path);
        }
    }
}
