using System.Text.Json;
using FedGrid.Cli.Commands;

namespace FedGrid.Cli.Tests;

public sealed class SweepCommandTests
{
    [Fact]
    public void Json_rows_have_the_contract_fields_and_the_table_and_plot_are_written()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-sweep-test-" + Guid.NewGuid().ToString("N"));
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int code = SweepCommand.Run("plain,private-columns", null, 1, dir, asJson: true, stdout, stderr);
        Assert.True(code == 0, stderr.ToString());
        using JsonDocument doc = JsonDocument.Parse(stdout.ToString());
        JsonElement[] rows = doc.RootElement.EnumerateArray().ToArray();
        Assert.Equal(2, rows.Length);
        foreach (JsonElement r in rows)
            foreach (string f in new[] { "scheme", "noiseMultiplier", "epsilon", "savingsCapturedPct", "violationSlots", "partialSumsExposureRatio", "uploadsExposureRatio" })
                Assert.True(r.TryGetProperty(f, out _), $"missing {f}");
        JsonElement plain = rows.Single(r => r.GetProperty("scheme").GetString() == "plain");
        JsonElement priv = rows.Single(r => r.GetProperty("scheme").GetString() == "private-columns");
        // The audit goal on a plain run: partial sums give base load away (relative RMSE ≤ 1e-6, so the ratio is tiny).
        Assert.True(plain.GetProperty("partialSumsExposureRatio").GetDouble() < 1e-3);
        Assert.True(priv.GetProperty("partialSumsExposureRatio").GetDouble() > plain.GetProperty("partialSumsExposureRatio").GetDouble());
        Assert.Equal(JsonValueKind.Null, plain.GetProperty("noiseMultiplier").ValueKind);
        // The same figure the train verb's own summary reports.
        using JsonDocument summary = JsonDocument.Parse(File.ReadAllText(Path.Combine(dir, "plain", "summary.json")));
        Assert.Equal(summary.RootElement.GetProperty("savingsCapturedPct").GetDouble(), plain.GetProperty("savingsCapturedPct").GetDouble());
        string[] csv = File.ReadAllLines(Path.Combine(dir, "sweep.csv"));
        Assert.Equal(3, csv.Length);
        Assert.StartsWith("scheme,noiseMultiplier,epsilon,savingsCapturedPct,violationSlots,partialSumsExposureRatio,uploadsExposureRatio", csv[0]);
        Assert.Contains("| private-columns |", File.ReadAllText(Path.Combine(dir, "sweep.md")));
        // Each run folder also gets the audit verb's files, so the most exposed household can be looked at.
        foreach (string run in new[] { "plain", "private-columns" })
        {
            using JsonDocument audit = JsonDocument.Parse(File.ReadAllText(Path.Combine(dir, run, "audit.json")));
            Assert.Equal(run, audit.RootElement.GetProperty("scheme").GetString());
            Assert.Contains("<svg", File.ReadAllText(Path.Combine(dir, run, "exposure-report.html")));
        }
        byte[] png = File.ReadAllBytes(Path.Combine(dir, "privacy-utility.png"));
        Assert.Equal(new byte[] { 0x89, 0x50, 0x4E, 0x47 }, png[..4]); // PNG signature (ISO/IEC 15948)
    }

    [Fact]
    public void Schemes_and_noise_are_checked_before_any_run()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-sweep-bad-" + Guid.NewGuid().ToString("N"));
        var e1 = Assert.Throws<UserInputException>(() => SweepCommand.Run("plain,nonsense", null, 1, dir, true, TextWriter.Null, TextWriter.Null));
        Assert.Contains("unknown scheme 'nonsense'", e1.Message);
        var e2 = Assert.Throws<UserInputException>(() => SweepCommand.Run("plain", "0.5,x", 1, dir, true, TextWriter.Null, TextWriter.Null));
        Assert.Contains("--noise: 'x'", e2.Message);
        Assert.False(Directory.Exists(Path.Combine(dir, "plain")));
    }

    [Fact]
    public void Mask_uploads_and_delta_are_checked_before_any_run_and_parsed()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-sweep-bad-" + Guid.NewGuid().ToString("N"));
        var e1 = Assert.Throws<UserInputException>(() => SweepCommand.Run("plain,dp", null, 1, dir, true, TextWriter.Null, TextWriter.Null, maskUploads: true));
        Assert.Contains("--mask-uploads: none of the schemes (plain,dp) masks", e1.Message);
        var e2 = Assert.Throws<UserInputException>(() => SweepCommand.Run("dp", null, 1, dir, true, TextWriter.Null, TextWriter.Null, dpSettings: new DpSettings(Delta: 1)));
        Assert.Contains("--delta must lie strictly between 0 and 1, got 1", e2.Message);
        var e3 = Assert.Throws<UserInputException>(() => SweepCommand.Run("dp", null, 1, dir, true, TextWriter.Null, TextWriter.Null, dpSettings: new DpSettings(UploadClipNorm: -2)));
        Assert.Contains("--upload-clip-norm", e3.Message);
        Assert.False(Directory.Exists(Path.Combine(dir, "dp")));
        System.CommandLine.ParseResult parsed = Verbs.All().Single(c => c.Name == "sweep").Parse("--scheme masked-sums --mask-uploads --delta 1e-3 --clip-norm 2 --upload-clip-norm 10");
        Assert.Empty(parsed.Errors);
        Assert.True(parsed.GetValue<bool>("--mask-uploads"));
        Assert.Equal(1e-3, parsed.GetValue<double?>("--delta"));
        Assert.Equal(2, parsed.GetValue<double?>("--clip-norm"));
        Assert.Equal(10, parsed.GetValue<double?>("--upload-clip-norm"));
    }

    [Fact]
    public void Without_scheme_the_sweep_covers_every_scheme_of_the_train_verb()
    {
        System.CommandLine.Command sweep = Verbs.All().Single(c => c.Name == "sweep");
        System.CommandLine.ParseResult parsed = sweep.Parse("--days 1");
        Assert.Empty(parsed.Errors);
        Assert.Equal(string.Join(",", FedGrid.Federation.Schemes.FederationSchemes.Names), parsed.GetValue<string>("--scheme"));
    }

    [Fact]
    public void Dp_sweep_runs_every_noise_and_epsilon_falls_as_the_noise_grows()
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-sweep-dp-" + Guid.NewGuid().ToString("N"));
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int code = SweepCommand.Run("plain,dp", "1,4", 1, dir, asJson: true, stdout, stderr, dpSettings: new DpSettings(ClipNorm: 2, UploadClipNorm: 10));
        try
        {
            Assert.True(code == 0, stderr.ToString());
            using JsonDocument doc = JsonDocument.Parse(stdout.ToString());
            JsonElement[] rows = doc.RootElement.EnumerateArray().ToArray();
            Assert.Equal(["plain", "dp", "dp"], rows.Select(r => r.GetProperty("scheme").GetString()));
            Assert.Equal(JsonValueKind.Null, rows[0].GetProperty("epsilon").ValueKind);
            Assert.Equal(1, rows[1].GetProperty("noiseMultiplier").GetDouble());
            Assert.Equal(4, rows[2].GetProperty("noiseMultiplier").GetDouble());
            double e1 = rows[1].GetProperty("epsilon").GetDouble(), e4 = rows[2].GetProperty("epsilon").GetDouble();
            Assert.True(double.IsFinite(e1) && double.IsFinite(e4) && e4 > 0, $"ε {e1}, {e4}");
            Assert.True(e4 < e1, $"ε at z = 4 ({e4}) is not below ε at z = 1 ({e1})");
            foreach (JsonElement r in rows[1..])
                Assert.Equal(JsonValueKind.Number, r.GetProperty("savingsCapturedPct").ValueKind);
            // The noisy partial sums hide base load better than plain's clear ones.
            Assert.True(rows[2].GetProperty("partialSumsExposureRatio").GetDouble() > rows[0].GetProperty("partialSumsExposureRatio").GetDouble());
            Assert.True(Directory.Exists(Path.Combine(dir, "dp-z4")));
            // The dp runs got the sweep's clipping norms; plain, which has none, was run without them.
            using (JsonDocument dpSummary = JsonDocument.Parse(File.ReadAllText(Path.Combine(dir, "dp-z4", "summary.json"))))
            {
                Assert.Equal(2, dpSummary.RootElement.GetProperty("clipNorm").GetDouble());
                Assert.Equal(10, dpSummary.RootElement.GetProperty("uploadClipNorm").GetDouble());
            }
            using (JsonDocument plainSummary = JsonDocument.Parse(File.ReadAllText(Path.Combine(dir, "plain", "summary.json"))))
                Assert.False(plainSummary.RootElement.TryGetProperty("clipNorm", out _));
        }
        finally { Directory.Delete(dir, true); }
    }
}
