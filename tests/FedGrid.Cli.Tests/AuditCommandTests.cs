using System.Text.Json;

namespace FedGrid.Cli.Tests;

public sealed class AuditCommandTests
{
    private static string TrainedRun(string scheme)
    {
        string dir = Directory.CreateTempSubdirectory($"fedgrid-cli-audit-{scheme}-").FullName;
        var (code, _, err) = CliProcess.Run("train", "--mode", "federated", "--scheme", scheme, "--days", "1", "--out", dir, "--json");
        Assert.True(code == 0, err);
        return dir;
    }

    [Fact]
    public void Json_summary_of_a_plain_run_has_the_contract_fields_and_exact_partial_sums()
    {
        string dir = TrainedRun("plain");
        var (code, stdout, stderr) = CliProcess.Run("audit", dir, "--side-info", "substation-meter,priors", "--json", "--report");
        Assert.True(code == 0, stderr);
        using JsonDocument doc = JsonDocument.Parse(stdout); // stdout is only JSON
        JsonElement root = doc.RootElement;
        Assert.True(root.GetProperty("occupancyAccuracy").GetDouble() is > 0 and <= 1);
        JsonElement[] channels = root.GetProperty("channels").EnumerateArray().ToArray();
        foreach (JsonElement c in channels)
            foreach (string f in new[] { "channel", "attack", "quantity", "relativeRmse", "worstHouseholdRelativeRmse", "priorRelativeRmse", "exposureRatio", "households" })
                Assert.True(c.TryGetProperty(f, out _), $"missing {f}");
        JsonElement ps = channels.Single(c => c.GetProperty("channel").GetString() == "partialSums" && c.GetProperty("quantity").GetString() == "baseLoad");
        Assert.True(ps.GetProperty("relativeRmse").GetDouble() <= 1e-6);
        Assert.Equal(32, ps.GetProperty("households").GetInt32());
        foreach (string ch in new[] { "partialSums", "uploads", "projectionInputs", "physicalFloor", "joint" })
            Assert.Contains(channels, c => c.GetProperty("channel").GetString() == ch);
        Assert.True(File.Exists(Path.Combine(dir, "audit.json")));
        Assert.Contains("not a legal compliance finding", File.ReadAllText(Path.Combine(dir, "exposure-report.html")));
    }

    [Fact]
    public void Gradient_matching_adds_an_uploads_row_and_checks_its_settings()
    {
        string dir = TrainedRun("plain");
        var (code, stdout, stderr) = CliProcess.Run("audit", dir, "--gradient-matching", "--gradient-matching-iterations", "20", "--json");
        Assert.True(code == 0, stderr);
        using JsonDocument doc = JsonDocument.Parse(stdout);
        JsonElement[] rows = doc.RootElement.GetProperty("channels").EnumerateArray()
            .Where(c => c.GetProperty("attack").GetString() == "gradientMatching").ToArray();
        Assert.Equal(3, rows.Length);
        Assert.All(rows, r => Assert.Equal("uploads", r.GetProperty("channel").GetString()));
        Assert.Contains("gradient matching 32/32 households", stderr);
        var (bad, _, err) = CliProcess.Run("audit", dir, "--gradient-matching", "--gradient-matching-iterations", "0");
        Assert.Equal(2, bad);
        Assert.Contains("--gradient-matching-iterations", err);
    }

    [Fact]
    public void Bad_side_information_and_missing_folder_exit_with_code_2()
    {
        var (code, _, err) = CliProcess.Run("audit", "/nonexistent/run", "--json");
        Assert.Equal(2, code);
        Assert.Contains("/nonexistent/run", err);
        var (code2, _, err2) = CliProcess.Run("audit", "/tmp", "--side-info", "smart-meter");
        Assert.Equal(2, code2);
        Assert.Contains("--side-info: unknown 'smart-meter'", err2);
    }
}
