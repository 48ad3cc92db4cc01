using System.CommandLine;
using System.Globalization;
using System.Text;
using System.Text.Json;
using FedGrid.Audit;
using FedGrid.Audit.Attacks;
using FedGrid.Audit.Runs;
using FedGrid.Audit.Scoring;
using FedGrid.Charts;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Schemes;

namespace FedGrid.Cli.Commands;

/// <summary>One trained and audited combination of the sweep.</summary>
/// <param name="Scheme">Scheme name as given to the train verb.</param>
/// <param name="NoiseMultiplier">Noise multiplier z of the run (the train verb's default for a dp scheme without --noise), or null for a scheme without noise.</param>
/// <param name="Epsilon">ε of the run's summary, or null where the summary has none.</param>
/// <param name="SavingsCapturedPct">Savings captured over the final window, %.</param>
/// <param name="ViolationSlots">Slots with a limit violation.</param>
/// <param name="PartialSumsExposureRatio">Base load, partial-sums channel: the lowest exposure ratio over households and attacks, or null.</param>
/// <param name="UploadsExposureRatio">Base load, uploads channel: the lowest exposure ratio over households and attacks, or null.</param>
/// <param name="Folder">Run folder.</param>
/// <param name="Delta">δ of the run's (ε, δ), or null where no DP is applied.</param>
/// <param name="MaskUploads">Whether the run masked its uploads.</param>
/// <summary>The dp runs' own options of a sweep, passed to the train verb for the dp schemes only (null: its default).</summary>
/// <param name="Delta">δ of the (ε, δ) (--delta).</param>
/// <param name="ClipNorm">Clipping norm of each partial-sums vector (--clip-norm).</param>
/// <param name="UploadClipNorm">Clipping norm of each round's shared-parameter update (--upload-clip-norm).</param>
internal sealed record DpSettings(double? Delta = null, double? ClipNorm = null, double? UploadClipNorm = null);

internal sealed record SweepRow(string Scheme, double? NoiseMultiplier, double? Epsilon, double? SavingsCapturedPct, long ViolationSlots,
    double? PartialSumsExposureRatio, double? UploadsExposureRatio, string Folder, double? Delta = null, bool MaskUploads = false);

/// <summary>
/// <c>fedgrid sweep --scheme S[,S…] [--noise LIST] [--days N] [--out DIR] [--json]</c>: trains (the train verb's federated
/// mode) and audits (the audit verb's attacks and scoring, priors as side information) every combination, and writes
/// sweep.csv, sweep.md and privacy-utility.png/svg into DIR.
/// </summary>
internal static class SweepCommand
{
    public const int DefaultDays = 14;

    public static Command Create()
    {
        var schemes = new Option<string>("--scheme")
        {
            Description = $"comma-separated schemes, any the train verb's federated mode accepts (default: all of them, {string.Join(",", FederationSchemes.Names)})",
            DefaultValueFactory = _ => string.Join(",", FederationSchemes.Names),
        };
        var noise = new Option<string?>("--noise") { Description = $"comma-separated noise multipliers z, applied to the {DifferentiallyPrivateScheme.SchemeName} and {DifferentiallyPrivateScheme.MaskedSchemeName} schemes (other schemes run once; a dp scheme without --noise runs once at z = {DifferentialPrivacySettings.DefaultNoiseMultiplier})" };
        var days = new Option<int>("--days") { Description = $"training days of every run (default {DefaultDays})", DefaultValueFactory = _ => DefaultDays };
        var outDir = new Option<string?>("--out") { Description = "sweep folder (default runs/sweep-<days>d); one run folder per combination inside" };
        var json = new Option<bool>("--json") { Description = "print only the rows as a JSON array on stdout" };
        var maskUploads = new Option<bool>("--mask-uploads") { Description = $"mask the uploads of the {MaskedSumsScheme.SchemeName} and {DifferentiallyPrivateScheme.MaskedSchemeName} runs too (the train verb's --mask-uploads; other schemes run as usual)" };
        var delta = new Option<double?>("--delta") { Description = $"δ of the dp runs' (ε, δ), in (0, 1) (default {DifferentialPrivacySettings.DefaultDelta}; other schemes ignore it)" };
        var clip = new Option<double?>("--clip-norm") { Description = "the dp runs' clipping norm of each partial-sums vector (the train verb's --clip-norm; other schemes ignore it)" };
        var uploadClip = new Option<double?>("--upload-clip-norm") { Description = "the dp runs' clipping norm of each round's shared-parameter update (the train verb's --upload-clip-norm; other schemes ignore it)" };
        var cmd = new Command("sweep", "Train and audit every scheme × noise combination; write a table and a privacy–utility plot (exposure of the most exposed household vs savings captured).")
        {
            schemes, noise, days, outDir, json, maskUploads, delta, clip, uploadClip,
        };
        cmd.SetAction(parse => Run(parse.GetValue(schemes)!, parse.GetValue(noise), parse.GetValue(days), parse.GetValue(outDir), parse.GetValue(json), Console.Out, Console.Error,
            parse.GetValue(maskUploads), new DpSettings(parse.GetValue(delta), parse.GetValue(clip), parse.GetValue(uploadClip))));
        return cmd;
    }

    /// <summary>Parses the lists, runs every combination, writes the table and the plot; returns the exit code.</summary>
    public static int Run(string schemeList, string? noiseList, int days, string? outDir, bool asJson, TextWriter stdout, TextWriter progress,
        bool maskUploads = false, DpSettings? dpSettings = null)
    {
        double? delta = dpSettings?.Delta;
        if (delta is { } dl && !(dl > 0 && dl < 1)) throw new UserInputException($"--delta must lie strictly between 0 and 1, got {dl}");
        string[] schemes = schemeList.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries);
        if (schemes.Length == 0) throw new UserInputException("--scheme: give at least one scheme");
        double[] noises = ParseNoise(noiseList);
        var combos = new List<(string Scheme, double? Noise)>();
        foreach (string s in schemes.Distinct(StringComparer.Ordinal))
        {
            if (FederationSchemes.IsDifferentiallyPrivate(s) && noises.Length > 0) combos.AddRange(noises.Select(z => (s, (double?)z)));
            else combos.Add((s, null));
        }
        string dir = Path.GetFullPath(outDir ?? Path.Combine("runs", $"sweep-{days}d"));
        try { Directory.CreateDirectory(dir); }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or ArgumentException or NotSupportedException)
        {
            throw new UserInputException($"--out: cannot create the sweep folder '{dir}': {e.Message}");
        }
        // Every option is checked by the train verb itself before any run starts.
        if (maskUploads && !combos.Any(c => FederationSchemes.CanMaskUploads(c.Scheme)))
            throw new UserInputException($"--mask-uploads: none of the schemes ({string.Join(",", schemes)}) masks; it applies to {MaskedSumsScheme.SchemeName} and {DifferentiallyPrivateScheme.MaskedSchemeName}");
        TrainOptions Options(string scheme, double? noise) => SweepCommand.Options(scheme, noise, days, dir, maskUploads, dpSettings);
        foreach (var (s, z) in combos) TrainFederated.Validate(Options(s, z));
        var rows = new List<SweepRow>();
        for (int i = 0; i < combos.Count; i++)
        {
            var (s, z) = combos[i];
            TrainOptions o = Options(s, z);
            progress.WriteLine($"sweep: run {i + 1}/{combos.Count}: {Path.GetFileName(o.OutDir)}");
            var captured = new StringWriter();
            int code = TrainCommand.Run(o, captured, progress);
            if (code != CliRunner.ExitOk) return code;
            using JsonDocument summary = JsonDocument.Parse(captured.ToString());
            (AuditRun run, AttackResults results, ScoreCard? card) = AuditCommand.Audit(o.OutDir!, priors: true, meter: false, gradientMatching: null, progress);
            AuditCommand.WriteFiles(o.OutDir!, run, results, card, writeReport: true, progress);
            rows.Add(new SweepRow(s, z ?? Number(summary.RootElement, "noiseMultiplier"), Number(summary.RootElement, "epsilon"), Number(summary.RootElement, "savingsCapturedPct"),
                summary.RootElement.GetProperty("violationSlots").GetInt64(), LowestExposure(card, Channel.PartialSums), LowestExposure(card, Channel.Uploads), o.OutDir!,
                Number(summary.RootElement, "delta"), o.Federated!.MaskUploads));
        }
        File.WriteAllText(Path.Combine(dir, "sweep.csv"), Csv(rows));
        File.WriteAllText(Path.Combine(dir, "sweep.md"), Markdown(rows, days));
        Chart chart = Plot(rows, days);
        File.WriteAllBytes(Path.Combine(dir, "privacy-utility.png"), PngChartRenderer.Render(chart, 900, 520));
        File.WriteAllText(Path.Combine(dir, "privacy-utility.svg"), SvgChartRenderer.Render(chart, 900, 520));
        progress.WriteLine($"sweep: wrote {dir}");
        if (asJson)
        {
            stdout.Write(Json(rows));
            return CliRunner.ExitOk;
        }
        stdout.Write(Markdown(rows, days));
        stdout.WriteLine($"Sweep folder: {dir}");
        stdout.WriteLine("  sweep.csv  sweep.md  privacy-utility.png  privacy-utility.svg  (one run folder per combination)");
        stdout.WriteLine();
        stdout.WriteLine("Caution: " + AuditDocument.Caution);
        return CliRunner.ExitOk;
    }

    private static double[] ParseNoise(string? list)
    {
        if (list is null) return [];
        var values = new List<double>();
        foreach (string part in list.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries))
        {
            if (!double.TryParse(part, NumberStyles.Float, CultureInfo.InvariantCulture, out double z) || !(z >= 0) || double.IsInfinity(z))
                throw new UserInputException($"--noise: '{part}' is not a finite number ≥ 0");
            values.Add(z);
        }
        if (values.Count == 0) throw new UserInputException("--noise: give at least one value");
        return values.Distinct().ToArray();
    }

    private static TrainOptions Options(string scheme, double? noise, int days, string dir, bool maskUploads, DpSettings? dpSettings)
    {
        bool masked = maskUploads && FederationSchemes.CanMaskUploads(scheme);
        bool dp = FederationSchemes.IsDifferentiallyPrivate(scheme);
        return new(TrainFederated.Mode, "actor-critic", Days: days, OutDir: Path.Combine(dir, Label(scheme, noise, masked)), Json: true,
            Federated: new FederatedTrainOptions(scheme, NoiseMultiplier: noise, MaskUploads: masked, Delta: dp ? dpSettings?.Delta : null,
                ClipNorm: dp ? dpSettings?.ClipNorm : null, UploadClipNorm: dp ? dpSettings?.UploadClipNorm : null));
    }

    private static string Label(string scheme, double? noise, bool maskUploads) =>
        (noise is { } z ? string.Create(CultureInfo.InvariantCulture, $"{scheme}-z{z:G4}") : scheme) + (maskUploads ? "-masked-uploads" : "");

    private static double? Number(JsonElement e, string name) =>
        e.TryGetProperty(name, out JsonElement v) && v.ValueKind == JsonValueKind.Number ? v.GetDouble() : null;

    /// <summary>Base load on <paramref name="channel"/>: the lowest exposure ratio over households and attacks (the most exposed household).</summary>
    internal static double? LowestExposure(ScoreCard? card, Channel channel)
    {
        if (card is null) return null;
        double best = double.PositiveInfinity;
        foreach (HouseholdScore h in card.Households)
            if (h.Channel == channel && h.Quantity == Quantity.BaseLoad && double.IsFinite(h.ExposureRatio)) best = Math.Min(best, h.ExposureRatio);
        return double.IsFinite(best) ? best : null;
    }

    private static string F(double? v, string format = "G4") => v is { } x ? x.ToString(format, CultureInfo.InvariantCulture) : "";

    private static string Csv(IReadOnlyList<SweepRow> rows)
    {
        var sb = new StringBuilder("scheme,noiseMultiplier,epsilon,savingsCapturedPct,violationSlots,partialSumsExposureRatio,uploadsExposureRatio,folder\n");
        foreach (SweepRow r in rows)
            sb.Append(CultureInfo.InvariantCulture, $"{r.Scheme},{F(r.NoiseMultiplier, "R")},{F(r.Epsilon, "R")},{F(r.SavingsCapturedPct, "R")},{r.ViolationSlots},{F(r.PartialSumsExposureRatio, "R")},{F(r.UploadsExposureRatio, "R")},{Path.GetFileName(r.Folder)}\n");
        return sb.ToString();
    }

    private static string Markdown(IReadOnlyList<SweepRow> rows, int days)
    {
        var sb = new StringBuilder();
        sb.AppendLine(CultureInfo.InvariantCulture, $"Privacy–utility sweep, {days} days per run. Exposure ratio: base load, most exposed household (lowest ratio; near 0 fully exposed, near 1 no better than the prior).");
        sb.AppendLine();
        sb.AppendLine("| scheme | noise z | ε | savings captured % | violation slots | partial-sums exposure | uploads exposure |");
        sb.AppendLine("|---|---:|---:|---:|---:|---:|---:|");
        foreach (SweepRow r in rows)
            sb.AppendLine(CultureInfo.InvariantCulture, $"| {r.Scheme}{(r.MaskUploads ? " (masked uploads)" : "")} | {Dash(r.NoiseMultiplier)} | {Dash(r.Epsilon)} | {Dash(r.SavingsCapturedPct, "0.0")} | {r.ViolationSlots} | {Dash(r.PartialSumsExposureRatio, "G3")} | {Dash(r.UploadsExposureRatio, "G3")} |");
        return sb.ToString();
    }

    private static string Dash(double? v, string format = "G4") => v is null ? "–" : F(v, format);

    /// <summary>One point per run: x = the lower of the two channels' lowest exposure ratios, y = savings captured; one colour per scheme.</summary>
    private static Chart Plot(IReadOnlyList<SweepRow> rows, int days)
    {
        var series = new List<Series>();
        foreach (IGrouping<string, SweepRow> g in rows.GroupBy(r => r.Scheme))
        {
            var pts = g.Where(r => r.SavingsCapturedPct is not null && Exposure(r) is not null).ToArray();
            if (pts.Length == 0) continue;
            series.Add(new Series(g.Key, pts.Select(r => Exposure(r)!.Value).ToArray(), pts.Select(r => r.SavingsCapturedPct!.Value).ToArray(), SeriesKind.Scatter));
        }
        double maxX = rows.Select(Exposure).Where(x => x is not null).Select(x => x!.Value).DefaultIfEmpty(1).Max();
        return new Chart($"Privacy-utility sweep ({days} days per run)", "base-load exposure ratio, most exposed household",
            "savings captured [%]", series)
        {
            // 0 = fully exposed, 1 = no better than the prior: the whole scale is always shown.
            XRange = new AxisRange(0, Math.Max(1.1, 1.05 * maxX)),
        };
    }

    private static double? Exposure(SweepRow r) =>
        (r.PartialSumsExposureRatio, r.UploadsExposureRatio) switch
        {
            ({ } a, { } b) => Math.Min(a, b),
            ({ } a, null) => a,
            (null, { } b) => b,
            _ => null,
        };

    private static string Json(IReadOnlyList<SweepRow> rows)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartArray();
            foreach (SweepRow r in rows)
            {
                w.WriteStartObject();
                w.WriteString("scheme", r.Scheme);
                Nullable(w, "noiseMultiplier", r.NoiseMultiplier);
                Nullable(w, "epsilon", r.Epsilon);
                Nullable(w, "delta", r.Delta);
                w.WriteBoolean("maskUploads", r.MaskUploads);
                Nullable(w, "savingsCapturedPct", r.SavingsCapturedPct);
                w.WriteNumber("violationSlots", r.ViolationSlots);
                Nullable(w, "partialSumsExposureRatio", r.PartialSumsExposureRatio);
                Nullable(w, "uploadsExposureRatio", r.UploadsExposureRatio);
                w.WriteString("folder", r.Folder);
                w.WriteEndObject();
            }
            w.WriteEndArray();
        }
        return Encoding.UTF8.GetString(ms.ToArray()) + Environment.NewLine;
    }

    private static void Nullable(Utf8JsonWriter w, string name, double? v)
    {
        if (v is { } x && double.IsFinite(x)) w.WriteNumber(name, x);
        else w.WriteNull(name);
    }
}
