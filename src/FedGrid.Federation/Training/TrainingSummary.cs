using System.Globalization;
using System.Text;
using System.Text.Json;

namespace FedGrid.Federation.Training;

/// <summary>
/// The headline figures of a training run, all over the last <see cref="Window"/> days (7, or every day of a shorter
/// run), the learner and the baselines on the same days:
/// <list type="bullet">
/// <item><c>finalDailyCost</c>, <c>noControlDailyCost</c>, <c>oracleDailyCost</c>: mean daily bill + discomfort, $.</item>
/// <item><c>savingsCapturedPct</c> = 100 × (noControl − final) / (noControl − oracle).</item>
/// <item><c>peakReductionPct</c> = 100 × (1 − learner's mean daily peak / no control's mean daily peak).</item>
/// <item><c>daysToNinetyPct</c>: first day (1-based) whose trailing 7-day mean savings against no control
/// (days d−6..d, fewer at the start) reach 90 % of the final savings; null when the final savings are not positive.</item>
/// </list>
/// <c>epsilon</c> and <c>delta</c>: the run's differential-privacy bound per household (null where no DP is applied).
/// The federated mode adds its own fields through <see cref="Extra"/>.
/// </summary>
/// <param name="Mode">"centralized" or another mode's name.</param>
/// <param name="Learner">Learner name.</param>
/// <param name="Tariff">Tariff name.</param>
/// <param name="Scenario">Scenario name.</param>
/// <param name="Households">Number of households.</param>
/// <param name="Days">Days trained.</param>
/// <param name="Seed">Run seed.</param>
/// <param name="Window">Days the final figures average over.</param>
/// <param name="FinalDailyCost">Learner's mean daily cost over the window, $.</param>
/// <param name="NoControlDailyCost">No control's mean daily cost over the window, $.</param>
/// <param name="OracleDailyCost">Perfect-foresight optimum's mean daily cost over the window, $ (null when not computed).</param>
/// <param name="SavingsCapturedPct">Share of the achievable savings the learner captured, % (null without the oracle or when no savings are achievable).</param>
/// <param name="PeakReductionPct">Reduction of the mean daily peak against no control, %.</param>
/// <param name="DaysToNinetyPct">First day reaching 90 % of the final savings (null when the final savings are not positive).</param>
/// <param name="FinalPeakKw">Learner's mean daily peak import over the window, kW.</param>
/// <param name="NoControlPeakKw">No control's mean daily peak import over the window, kW.</param>
/// <param name="ViolationSlots">Slots with a broken limit over the whole run (learner, after projection).</param>
/// <param name="NoControlViolationSlots">Slots with a broken limit over the whole run without control.</param>
/// <param name="Projections">Slots whose proposals the projection changed, whole run.</param>
/// <param name="ProjectionTrouble">Projections that did not end verified, whole run.</param>
/// <param name="DecisionSteps">Slots stepped.</param>
/// <param name="TrainingSeconds">Wall time of the training, s.</param>
public sealed record TrainingSummary(string Mode, string Learner, string Tariff, string Scenario, int Households, int Days, ulong Seed, int Window,
    double FinalDailyCost, double NoControlDailyCost, double? OracleDailyCost, double? SavingsCapturedPct, double PeakReductionPct,
    int? DaysToNinetyPct, double FinalPeakKw, double NoControlPeakKw, int ViolationSlots, int NoControlViolationSlots, int Projections,
    ProjectionCounts ProjectionTrouble, long DecisionSteps, double TrainingSeconds)
{
    /// <summary>Days the final figures average over (fewer when the run is shorter).</summary>
    public const int FinalWindowDays = 7;

    /// <summary>Share of the final savings that <see cref="DaysToNinetyPct"/> waits for.</summary>
    public const double NinetyPct = 0.9;

    /// <summary>ε of the run's (ε, δ) differential-privacy bound per household, or null where no DP is applied (written as <c>epsilon</c>).</summary>
    public double? Epsilon { get; init; }

    /// <summary>δ of that bound, or null where no DP is applied (written as <c>delta</c>).</summary>
    public double? Delta { get; init; }

    /// <summary>Further fields a mode adds (written after the common ones, in order); numbers, strings or booleans.</summary>
    public IReadOnlyList<KeyValuePair<string, object>> Extra { get; init; } = [];

    /// <summary>100 × (noControl − final) / (noControl − oracle); null when noControl ≤ oracle (nothing to capture).</summary>
    public static double? SavingsCaptured(double noControl, double final, double oracle) =>
        noControl - oracle > 1e-12 ? 100 * (noControl - final) / (noControl - oracle) : null;

    /// <summary>
    /// The first day (1-based) whose trailing mean over up to <see cref="FinalWindowDays"/> days of (noControl − learner)
    /// reaches <see cref="NinetyPct"/> of the final savings (the same mean over the last window); null when the final savings are not positive.
    /// </summary>
    public static int? DaysToNinety(IReadOnlyList<double> learner, IReadOnlyList<double> noControl)
    {
        ArgumentNullException.ThrowIfNull(learner);
        ArgumentNullException.ThrowIfNull(noControl);
        if (learner.Count != noControl.Count) throw new ArgumentException("learner and no-control need the same days");
        if (learner.Count == 0) return null;
        double final = TrailingMeanSavings(learner, noControl, learner.Count - 1);
        if (!(final > 0)) return null;
        for (int d = 0; d < learner.Count; d++)
            if (TrailingMeanSavings(learner, noControl, d) >= NinetyPct * final) return d + 1;
        return learner.Count;
    }

    /// <summary>Builds the summary of a run against the baselines on the same days.</summary>
    /// <param name="mode">Mode name.</param>
    /// <param name="run">The learner's run.</param>
    /// <param name="noControl">No control on the same days.</param>
    /// <param name="oracleDailyCost">The optimum's cost per day on the same days (NaN where not computed; the final window's days are needed), or null.</param>
    /// <param name="tariff">Tariff name.</param>
    /// <param name="scenario">Scenario name.</param>
    /// <param name="households">Households.</param>
    /// <param name="seed">Run seed.</param>
    public static TrainingSummary Create(string mode, TrainingRun run, IReadOnlyList<DayMetrics> noControl, IReadOnlyList<double>? oracleDailyCost,
        string tariff, string scenario, int households, ulong seed)
    {
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(noControl);
        int days = run.Days.Length;
        if (days == 0) throw new ArgumentException("the run has no days", nameof(run));
        if (noControl.Count != days) throw new ArgumentException($"no control has {noControl.Count} days, the run {days}", nameof(noControl));
        if (oracleDailyCost is not null && oracleDailyCost.Count != days)
            throw new ArgumentException($"the optimum has {oracleDailyCost.Count} days, the run {days}", nameof(oracleDailyCost));
        int window = Math.Min(FinalWindowDays, days), from = days - window;
        double Mean(Func<int, double> f)
        {
            double s = 0;
            for (int d = from; d < days; d++) s += f(d);
            return s / window;
        }
        double final = Mean(d => run.Days[d].Cost), nc = Mean(d => noControl[d].Cost);
        double? oracle = null;
        if (oracleDailyCost is not null && Enumerable.Range(from, window).All(d => double.IsFinite(oracleDailyCost[d])))
            oracle = Mean(d => oracleDailyCost[d]);
        double peak = Mean(d => run.Days[d].PeakKw), ncPeak = Mean(d => noControl[d].PeakKw);
        var learnerCosts = run.Days.Select(d => d.Cost).ToArray();
        var ncCosts = noControl.Select(d => d.Cost).ToArray();
        var trouble = new ProjectionCounts(run.Days.Sum(d => d.ProjectionTrouble.Unverified), run.Days.Sum(d => d.ProjectionTrouble.Infeasible),
            run.Days.Sum(d => d.ProjectionTrouble.SolverFailures));
        return new TrainingSummary(mode, run.Learner, tariff, scenario, households, days, seed, window, final, nc, oracle,
            oracle is { } o ? SavingsCaptured(nc, final, o) : null, 100 * (1 - peak / ncPeak), DaysToNinety(learnerCosts, ncCosts),
            peak, ncPeak, run.Days.Sum(d => d.ViolationSlots), noControl.Sum(d => d.ViolationSlots), run.Days.Sum(d => d.Projections),
            trouble, run.DecisionSteps, run.Elapsed.TotalSeconds);
    }

    /// <summary>Writes the summary as one JSON object (field names as in the README "Training" section).</summary>
    /// <param name="writer">The writer.</param>
    /// <param name="files">Run-folder files to list (name → path), or null.</param>
    /// <param name="cautions">Cautions text to include, or null.</param>
    public void WriteJson(Utf8JsonWriter writer, IReadOnlyList<KeyValuePair<string, string>>? files = null, string? cautions = null)
    {
        ArgumentNullException.ThrowIfNull(writer);
        writer.WriteStartObject();
        writer.WriteString("mode", Mode);
        writer.WriteString("learner", Learner);
        writer.WriteString("tariff", Tariff);
        writer.WriteString("scenario", Scenario);
        writer.WriteNumber("households", Households);
        writer.WriteNumber("days", Days);
        writer.WriteNumber("seed", Seed);
        writer.WriteString("currency", "$");
        writer.WriteNumber("finalWindowDays", Window);
        writer.WriteNumber("finalDailyCost", Math.Round(FinalDailyCost, 4));
        writer.WriteNumber("noControlDailyCost", Math.Round(NoControlDailyCost, 4));
        WriteNullable(writer, "oracleDailyCost", OracleDailyCost, 4);
        WriteNullable(writer, "savingsCapturedPct", SavingsCapturedPct, 2);
        writer.WriteNumber("peakReductionPct", Math.Round(PeakReductionPct, 2));
        if (DaysToNinetyPct is { } d) writer.WriteNumber("daysToNinetyPct", d);
        else writer.WriteNull("daysToNinetyPct");
        writer.WriteNumber("finalPeakKw", Math.Round(FinalPeakKw, 3));
        writer.WriteNumber("noControlPeakKw", Math.Round(NoControlPeakKw, 3));
        writer.WriteNumber("violationSlots", ViolationSlots);
        writer.WriteNumber("noControlViolationSlots", NoControlViolationSlots);
        writer.WriteNumber("projections", Projections);
        writer.WriteNumber("projectionsUnverified", ProjectionTrouble.Unverified);
        writer.WriteNumber("projectionsInfeasible", ProjectionTrouble.Infeasible);
        writer.WriteNumber("projectionSolverFailures", ProjectionTrouble.SolverFailures);
        writer.WriteNumber("decisionSteps", DecisionSteps);
        writer.WriteNumber("trainingSeconds", Math.Round(TrainingSeconds, 3));
        WriteNullable(writer, "epsilon", Epsilon, 4);
        if (Delta is { } delta) writer.WriteNumber("delta", delta);
        else writer.WriteNull("delta");
        foreach (var (key, value) in Extra)
        {
            switch (value)
            {
                case string s: writer.WriteString(key, s); break;
                case bool b: writer.WriteBoolean(key, b); break;
                case int i: writer.WriteNumber(key, i); break;
                case long l: writer.WriteNumber(key, l); break;
                case double x: writer.WriteNumber(key, x); break;
                default: writer.WriteString(key, Convert.ToString(value, CultureInfo.InvariantCulture)); break;
            }
        }
        if (files is not null)
        {
            writer.WriteStartObject("files");
            foreach (var (name, path) in files) writer.WriteString(name, path);
            writer.WriteEndObject();
        }
        if (cautions is not null) writer.WriteString("cautions", cautions);
        writer.WriteEndObject();
    }

    private static void WriteNullable(Utf8JsonWriter w, string name, double? value, int digits)
    {
        if (value is { } v) w.WriteNumber(name, Math.Round(v, digits));
        else w.WriteNull(name);
    }

    private static double TrailingMeanSavings(IReadOnlyList<double> learner, IReadOnlyList<double> noControl, int day)
    {
        int from = Math.Max(0, day - FinalWindowDays + 1);
        double s = 0;
        for (int d = from; d <= day; d++) s += noControl[d] - learner[d];
        return s / (day - from + 1);
    }
}

/// <summary>Writes a training run folder: <c>daily.csv</c> and <c>summary.json</c> (a plot is the caller's).</summary>
public static class RunFolder
{
    /// <summary>Header of <c>daily.csv</c>.</summary>
    public const string DailyHeader = "day,cost,bill,discomfort,peakKw,violationSlots,projections";

    /// <summary>The <c>daily.csv</c> text: one row per day (money in $, 4 decimals; peak in kW).</summary>
    /// <param name="days">The learner's days.</param>
    public static string DailyCsv(IReadOnlyList<DayMetrics> days)
    {
        ArgumentNullException.ThrowIfNull(days);
        var ci = CultureInfo.InvariantCulture;
        var sb = new StringBuilder(DailyHeader).Append('\n');
        foreach (DayMetrics d in days)
            sb.Append(ci, $"{d.Day},{d.Cost:0.####},{d.Bill:0.####},{d.Discomfort:0.####},{d.PeakKw:0.###},{d.ViolationSlots},{d.Projections}\n");
        return sb.ToString();
    }

    /// <summary>The summary as indented UTF-8 JSON.</summary>
    /// <param name="summary">The summary.</param>
    /// <param name="files">Files to list, or null.</param>
    /// <param name="cautions">Cautions, or null.</param>
    public static byte[] SummaryJson(TrainingSummary summary, IReadOnlyList<KeyValuePair<string, string>>? files = null, string? cautions = null)
    {
        ArgumentNullException.ThrowIfNull(summary);
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
            summary.WriteJson(w, files, cautions);
        return ms.ToArray();
    }

    /// <summary>Creates <paramref name="folder"/> if needed and writes <c>daily.csv</c> and <c>summary.json</c>; returns the JSON bytes.</summary>
    /// <param name="folder">Run folder.</param>
    /// <param name="days">The learner's days.</param>
    /// <param name="summary">The summary.</param>
    /// <param name="files">Files to list in the summary, or null.</param>
    /// <param name="cautions">Cautions, or null.</param>
    public static byte[] Write(string folder, IReadOnlyList<DayMetrics> days, TrainingSummary summary,
        IReadOnlyList<KeyValuePair<string, string>>? files = null, string? cautions = null)
    {
        Directory.CreateDirectory(folder);
        File.WriteAllText(Path.Combine(folder, "daily.csv"), DailyCsv(days), new UTF8Encoding(false));
        byte[] json = SummaryJson(summary, files, cautions);
        File.WriteAllBytes(Path.Combine(folder, "summary.json"), json);
        return json;
    }
}
