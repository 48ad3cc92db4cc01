using System.Diagnostics;
using System.Text.Json;
using FedGrid.Audit.Attacks;
using FedGrid.Audit.Scoring;

namespace FedGrid.Audit.Tests;

public sealed class ReportTests
{
    private static (AuditContext, SyntheticRun, AttackResults, ScoreCard) Audited()
    {
        SyntheticRun run = SyntheticRun.Build(new SyntheticOptions { PlainWeights = true, Households = 6, UploadSamples = 96 });
        AttackResults results = Auditor.Attack(run.View);
        ScoreCard card = Scorer.Score(run.View, results, run.Truth);
        return (new AuditContext("synthetic-test", "plain", "household", ["priors", "substation-meter"]), run, results, card);
    }

    [Fact]
    public void Summary_json_has_the_contract_fields()
    {
        var (ctx, _, results, card) = Audited();
        using JsonDocument doc = JsonDocument.Parse(AuditDocument.SummaryJson(ctx, results, card));
        JsonElement root = doc.RootElement;
        Assert.True(root.GetProperty("occupancyAccuracy").GetDouble() is > 0 and <= 1);
        JsonElement[] channels = root.GetProperty("channels").EnumerateArray().ToArray();
        Assert.NotEmpty(channels);
        foreach (JsonElement c in channels)
        {
            Assert.Contains(c.GetProperty("channel").GetString(), new[] { "partialSums", "uploads", "projectionInputs", "physicalFloor", "joint" });
            Assert.Contains(c.GetProperty("quantity").GetString(), new[] { "baseLoad", "flexMinimum", "flexDesired" });
            foreach (string f in new[] { "attack", "relativeRmse", "worstHouseholdRelativeRmse", "priorRelativeRmse", "exposureRatio", "households" })
                Assert.True(c.TryGetProperty(f, out _), $"missing {f}");
            Assert.Equal(6, c.GetProperty("households").GetInt32());
        }
        JsonElement ps = channels.Single(c => c.GetProperty("channel").GetString() == "partialSums" && c.GetProperty("quantity").GetString() == "baseLoad");
        Assert.True(ps.GetProperty("relativeRmse").GetDouble() < 1e-6);
        Assert.Contains("not a legal compliance finding", root.GetProperty("caution").GetString());
    }

    [Fact]
    public void Audit_json_has_per_household_scores_and_identifiability()
    {
        var (ctx, run, results, card) = Audited();
        using JsonDocument doc = JsonDocument.Parse(AuditDocument.FullJson(ctx, run.View, results, card));
        JsonElement[] hs = doc.RootElement.GetProperty("households").EnumerateArray().ToArray();
        Assert.Equal(6, hs.Length);
        JsonElement first = hs[0];
        Assert.Equal("home-01", first.GetProperty("id").GetString());
        Assert.Contains(first.GetProperty("scores").EnumerateArray(), s => s.GetProperty("channel").GetString() == "joint" && s.TryGetProperty("rSquared", out _) && s.TryGetProperty("fractionWithin0p1Kw", out _) && s.TryGetProperty("priorRmseKw", out _));
        Assert.Contains(first.GetProperty("identifiability").EnumerateArray(), i => i.GetProperty("rank").GetInt32() == 4);
    }

    [Fact]
    public void Without_ground_truth_the_outputs_carry_identifiability_only()
    {
        var (ctx, run, results, _) = Audited();
        using JsonDocument doc = JsonDocument.Parse(AuditDocument.SummaryJson(ctx, results, null));
        Assert.False(doc.RootElement.GetProperty("scoredAgainstGroundTruth").GetBoolean());
        Assert.Empty(doc.RootElement.GetProperty("channels").EnumerateArray());
        Assert.Equal(JsonValueKind.Null, doc.RootElement.GetProperty("occupancyAccuracy").ValueKind);
        Assert.NotEmpty(doc.RootElement.GetProperty("identifiability").EnumerateArray());
        string html = AuditDocument.Html(ctx, run.View, results, null);
        Assert.Contains("No ground truth was available", html);
    }

    [Fact]
    public void Html_report_is_self_contained_with_threat_model_cautions_and_plots()
    {
        var (ctx, run, results, card) = Audited();
        string html = AuditDocument.Html(ctx, run.View, results, card);
        Assert.Contains("honest-but-curious coordinator", html);
        Assert.Contains("not a legal compliance finding", html);
        Assert.Contains("medically necessary", html);
        Assert.True(html.Split("<svg xmlns").Length - 1 >= 4, "exposure plot and three trace plots");
        Assert.DoesNotContain("<script", html);
        Assert.DoesNotContain("http://", html.Replace("http://www.w3.org/2000/svg", ""));
        Assert.DoesNotContain("https://", html);
        foreach (string id in run.View.Households.Select(h => h.Id)) Assert.Contains(id, html);
    }

    [Fact]
    public void Html_report_renders_in_headless_chromium()
    {
        // Outside check: Debian's chromium lays the page out and paints it (tests/run.sh installs it).
        const string chromium = "/usr/bin/chromium";
        Assert.True(File.Exists(chromium), "chromium is missing: apt-get install chromium (tests/run.sh does)");
        var (ctx, run, results, card) = Audited();
        string dir = Directory.CreateTempSubdirectory("fedgrid-report-").FullName;
        string page = Path.Combine(dir, "report.html"), png = Path.Combine(dir, "shot.png");
        File.WriteAllText(page, AuditDocument.Html(ctx, run.View, results, card));
        var psi = new ProcessStartInfo(chromium)
        {
            RedirectStandardOutput = true, RedirectStandardError = true,
        };
        foreach (string a in new[] { "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
                     "--disable-sync", "--no-first-run", $"--user-data-dir={Path.Combine(dir, "profile")}", $"--screenshot={png}", "--window-size=1200,2000", "file://" + page })
            psi.ArgumentList.Add(a);
        using (var p = Process.Start(psi)!)
        {
            p.StandardOutput.ReadToEndAsync();
            p.StandardError.ReadToEndAsync();
            Assert.True(p.WaitForExit(120_000), "chromium did not finish");
        }
        Assert.True(File.Exists(png), "no screenshot");
        // Read pixels back with the independent PNG reader: the caution box's vermilion border (#d55e00) must be painted somewhere in column 30..60.
        var read = new ProcessStartInfo("/usr/bin/python3") { RedirectStandardOutput = true, RedirectStandardError = true };
        read.ArgumentList.Add(Reference.Script("png_check.py"));
        read.ArgumentList.Add(png);
        for (int y = 100; y < 600; y += 2) read.ArgumentList.Add($"40,{y}");
        using var r = Process.Start(read)!;
        string[] lines = r.StandardOutput.ReadToEnd().Split('\n', StringSplitOptions.RemoveEmptyEntries);
        r.WaitForExit();
        Assert.Equal("1200 2000", lines[0]);
        Assert.Contains(lines.Skip(1), l => l.Split(' ') is [var rr, var gg, var bb] && Math.Abs(int.Parse(rr) - 0xd5) < 20 && Math.Abs(int.Parse(gg) - 0x5e) < 30 && int.Parse(bb) < 40);
    }
}
