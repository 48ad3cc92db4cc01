using System.Globalization;
using System.Text;
using System.Text.Encodings.Web;
using System.Text.Json;
using FedGrid.Charts;

namespace FedGrid.Audit.Scoring;

/// <summary>What the report says about the run it audits.</summary>
/// <param name="Title">Report title (e.g. the run folder).</param>
/// <param name="Scheme">Scheme of the run ("plain", "private-columns", …).</param>
/// <param name="ProjectionInputs">Form of the projection inputs ("household" or "bus-aggregate").</param>
/// <param name="SideInformation">Side information declared to the attacker (e.g. "priors", "substation-meter").</param>
public sealed record AuditContext(string Title, string Scheme, string ProjectionInputs, IReadOnlyList<string> SideInformation);

/// <summary>JSON and HTML renderings of an audit: the command's summary, <c>audit.json</c> and the offline report.</summary>
public static class AuditDocument
{
    /// <summary>The threat model, in words.</summary>
    public const string ThreatModel =
        "The adversary is an honest-but-curious coordinator: it follows the protocol and keeps every message it receives. " +
        "It knows the global model it broadcast (under the plain scheme this includes each household's first-layer columns W_m), " +
        "the feeder, the tariff, public priors on household load, and, when declared, the substation meter (total feeder import) " +
        "and the operator's bus meters. It attacks each message channel alone (partial sums, uploads, projection inputs) and all of " +
        "them jointly, and is compared with what bus-level metering alone reveals (the physical floor) and with a prior-only guess. " +
        "Collusion with households and malicious households are not modelled in these figures.";

    /// <summary>The cautions every audit output carries (DESIGN §8).</summary>
    public const string Caution =
        "Privacy figures are estimates under the stated threat model and this run's data; they are not a legal compliance finding. " +
        "FedGrid is a simulation and evaluation tool and does not control real equipment. Any field use of a load-control policy must " +
        "follow the utility's demand-response program and interconnection rules and local electrical codes and be reviewed by licensed " +
        "engineers; medically necessary and safety-related loads are never to be curtailed. Demo data are invented.";

    /// <summary>Writes the command's summary object: <c>channels</c>, <c>occupancyAccuracy</c> and identifiability.</summary>
    /// <param name="w">Writer.</param>
    /// <param name="context">Run description.</param>
    /// <param name="results">Attack results.</param>
    /// <param name="card">Scores, or null without ground truth.</param>
    public static void WriteSummary(Utf8JsonWriter w, AuditContext context, AttackResults results, ScoreCard? card)
    {
        ArgumentNullException.ThrowIfNull(w);
        ArgumentNullException.ThrowIfNull(context);
        ArgumentNullException.ThrowIfNull(results);
        w.WriteStartObject();
        WriteHead(w, context, card);
        WriteChannels(w, card);
        Number(w, "occupancyAccuracy", card?.OccupancyAccuracy ?? double.NaN);
        Number(w, "priorOccupancyAccuracy", card?.PriorOccupancyAccuracy ?? double.NaN);
        WriteIdentifiabilitySummary(w, results);
        WriteNotes(w, results);
        w.WriteEndObject();
    }

    /// <summary>Writes <c>audit.json</c>: the summary plus every household's figures.</summary>
    /// <param name="w">Writer.</param>
    /// <param name="context">Run description.</param>
    /// <param name="view">The attacker's view (household ids and buses).</param>
    /// <param name="results">Attack results.</param>
    /// <param name="card">Scores, or null without ground truth.</param>
    public static void WriteFull(Utf8JsonWriter w, AuditContext context, AttackerView view, AttackResults results, ScoreCard? card)
    {
        ArgumentNullException.ThrowIfNull(w);
        ArgumentNullException.ThrowIfNull(context);
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(results);
        w.WriteStartObject();
        WriteHead(w, context, card);
        w.WriteString("threatModel", ThreatModel);
        WriteChannels(w, card);
        Number(w, "occupancyAccuracy", card?.OccupancyAccuracy ?? double.NaN);
        Number(w, "priorOccupancyAccuracy", card?.PriorOccupancyAccuracy ?? double.NaN);
        w.WriteStartArray("households");
        for (int m = 0; m < view.Households.Count; m++)
        {
            HouseholdView h = view.Households[m];
            w.WriteStartObject();
            w.WriteString("id", h.Id);
            w.WriteString("bus", view.BusIds[h.Bus]);
            Number(w, "occupancyAccuracy", card is not null && card.HouseholdOccupancyAccuracy.TryGetValue(h.Id, out double acc) ? acc : double.NaN);
            w.WriteStartArray("identifiability");
            foreach (Identifiability id in results.Identifiability.Where(i => i.Household == m))
            {
                w.WriteStartObject();
                w.WriteString("channel", AuditNames.Of(id.Channel));
                w.WriteString("attack", id.Attack);
                w.WriteNumber("rank", id.Rank);
                w.WriteNumber("unknowns", id.Unknowns);
                Number(w, "conditionNumber", id.ConditionNumber);
                Number(w, "baseLoadBoundStdKw", id.BaseLoadBoundStdKw);
                w.WriteString("note", id.Note);
                w.WriteEndObject();
            }
            w.WriteEndArray();
            w.WriteStartArray("scores");
            if (card is not null)
                foreach (HouseholdScore s in card.Households.Where(s => s.Household == m))
                {
                    w.WriteStartObject();
                    w.WriteString("channel", AuditNames.Of(s.Channel));
                    w.WriteString("attack", s.Attack);
                    w.WriteString("quantity", AuditNames.Of(s.Quantity));
                    Number(w, "rmseKw", s.Attacked.Rmse);
                    Number(w, "relativeRmse", s.Attacked.RelativeRmse);
                    Number(w, "rSquared", s.Attacked.RSquared);
                    Number(w, "fractionWithin0p1Kw", s.Attacked.FractionWithin01Kw);
                    Number(w, "priorRmseKw", s.Prior.Rmse);
                    Number(w, "priorRelativeRmse", s.Prior.RelativeRmse);
                    Number(w, "priorRSquared", s.Prior.RSquared);
                    Number(w, "priorFractionWithin0p1Kw", s.Prior.FractionWithin01Kw);
                    Number(w, "exposureRatio", s.ExposureRatio);
                    w.WriteEndObject();
                }
            w.WriteEndArray();
            w.WriteEndObject();
        }
        w.WriteEndArray();
        WriteNotes(w, results);
        w.WriteEndObject();
    }

    /// <summary>The summary as indented JSON text.</summary>
    /// <param name="context">Run description.</param>
    /// <param name="results">Attack results.</param>
    /// <param name="card">Scores or null.</param>
    /// <returns>JSON text.</returns>
    public static string SummaryJson(AuditContext context, AttackResults results, ScoreCard? card) => Json(w => WriteSummary(w, context, results, card));

    /// <summary><c>audit.json</c> as indented JSON text.</summary>
    /// <param name="context">Run description.</param>
    /// <param name="view">The attacker's view.</param>
    /// <param name="results">Attack results.</param>
    /// <param name="card">Scores or null.</param>
    /// <returns>JSON text.</returns>
    public static string FullJson(AuditContext context, AttackerView view, AttackResults results, ScoreCard? card) => Json(w => WriteFull(w, context, view, results, card));

    private static string Json(Action<Utf8JsonWriter> write)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true, Encoder = JavaScriptEncoder.UnsafeRelaxedJsonEscaping }))
            write(w);
        return Encoding.UTF8.GetString(ms.ToArray()) + "\n";
    }

    private static void WriteHead(Utf8JsonWriter w, AuditContext c, ScoreCard? card)
    {
        w.WriteString("run", c.Title);
        w.WriteString("scheme", c.Scheme);
        w.WriteString("projectionInputs", c.ProjectionInputs);
        w.WriteStartArray("sideInformation");
        foreach (string s in c.SideInformation) w.WriteStringValue(s);
        w.WriteEndArray();
        w.WriteBoolean("scoredAgainstGroundTruth", card is not null);
        w.WriteString("caution", Caution);
    }

    private static void WriteChannels(Utf8JsonWriter w, ScoreCard? card)
    {
        w.WriteStartArray("channels");
        if (card is not null)
            foreach (ChannelSummary s in card.Summaries)
            {
                w.WriteStartObject();
                w.WriteString("channel", AuditNames.Of(s.Channel));
                w.WriteString("attack", s.Attack);
                w.WriteString("quantity", AuditNames.Of(s.Quantity));
                Number(w, "relativeRmse", s.RelativeRmse);
                Number(w, "worstHouseholdRelativeRmse", s.WorstHouseholdRelativeRmse);
                w.WriteString("worstHousehold", s.WorstHousehold);
                Number(w, "priorRelativeRmse", s.PriorRelativeRmse);
                Number(w, "exposureRatio", s.ExposureRatio);
                Number(w, "worstHouseholdExposureRatio", s.WorstHouseholdExposureRatio);
                w.WriteNumber("households", s.Households);
                w.WriteEndObject();
            }
        w.WriteEndArray();
    }

    private static void WriteIdentifiabilitySummary(Utf8JsonWriter w, AttackResults results)
    {
        w.WriteStartArray("identifiability");
        foreach (var g in results.Identifiability.GroupBy(i => (i.Channel, i.Attack)))
        {
            w.WriteStartObject();
            w.WriteString("channel", AuditNames.Of(g.Key.Channel));
            w.WriteString("attack", g.Key.Attack);
            w.WriteNumber("minRank", g.Min(i => i.Rank));
            w.WriteNumber("unknowns", g.Max(i => i.Unknowns));
            Number(w, "maxConditionNumber", g.Select(i => i.ConditionNumber).Where(double.IsFinite).DefaultIfEmpty(double.NaN).Max());
            Number(w, "maxBaseLoadBoundStdKw", g.Select(i => i.BaseLoadBoundStdKw).Where(double.IsFinite).DefaultIfEmpty(double.NaN).Max());
            w.WriteNumber("households", g.Count());
            w.WriteEndObject();
        }
        w.WriteEndArray();
    }

    private static void WriteNotes(Utf8JsonWriter w, AttackResults results)
    {
        w.WriteStartArray("notes");
        foreach (string n in results.Notes) w.WriteStringValue(n);
        w.WriteEndArray();
    }

    private static void Number(Utf8JsonWriter w, string name, double v)
    {
        if (double.IsFinite(v)) w.WriteNumber(name, v);
        else w.WriteNull(name);
    }

    /// <summary>
    /// The self-contained offline HTML report: threat model, cautions, exposure per channel (table and plot), true vs
    /// reconstructed base load of the most exposed households, per-household table, identifiability and notes. No
    /// scripts and no external references; plots are inline SVG.
    /// </summary>
    /// <param name="context">Run description.</param>
    /// <param name="view">The attacker's view.</param>
    /// <param name="results">Attack results.</param>
    /// <param name="card">Scores, or null without ground truth.</param>
    /// <returns>The HTML document.</returns>
    public static string Html(AuditContext context, AttackerView view, AttackResults results, ScoreCard? card)
    {
        ArgumentNullException.ThrowIfNull(context);
        ArgumentNullException.ThrowIfNull(view);
        ArgumentNullException.ThrowIfNull(results);
        var sb = new StringBuilder();
        sb.Append("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>FedGrid exposure report: ").Append(E(context.Title)).Append("</title>\n");
        sb.Append("<style>body{font-family:DejaVu Sans,Helvetica,Arial,sans-serif;margin:24px;max-width:1150px;color:#111}" +
                  "table{border-collapse:collapse;margin:8px 0 16px}td,th{border:1px solid #bbb;padding:3px 7px;font-size:13px;text-align:right}" +
                  "th{background:#eef2f5}td.l,th.l{text-align:left}.caution{border:2px solid #d55e00;background:#fff6ef;padding:10px 14px;margin:12px 0}" +
                  ".hi{background:#fde0cc}h2{margin-top:28px;border-bottom:1px solid #ccc}</style>\n</head>\n<body>\n");
        sb.Append("<h1>Exposure report</h1>\n<p>Run <b>").Append(E(context.Title)).Append("</b>, scheme <b>").Append(E(context.Scheme))
          .Append("</b>, projection inputs <b>").Append(E(context.ProjectionInputs)).Append("</b>, ").Append(view.Households.Count)
          .Append(" households, ").Append(view.SlotCount).Append(" slots. Side information declared to the attacker: <b>")
          .Append(E(context.SideInformation.Count == 0 ? "none" : string.Join(", ", context.SideInformation))).Append("</b>.</p>\n");
        sb.Append("<div class=\"caution\"><b>Caution.</b> ").Append(E(Caution)).Append("</div>\n");
        sb.Append("<h2>Threat model</h2>\n<p>").Append(E(ThreatModel)).Append("</p>\n");
        sb.Append("<p>How to read the figures: <i>relative RMSE</i> is the reconstruction's root-mean-square error over the RMS of the true series; " +
                  "<i>exposure ratio</i> is the attack's RMSE over the RMSE of the prior-only guess (the public mean profile): near 0 the quantity is " +
                  "fully exposed, near 1 or above the attack does no better than guessing. The physical floor is what the operator's bus meters reveal with no message at all.</p>\n");
        if (card is null)
        {
            sb.Append("<p><b>No ground truth was available</b>: only identifiability figures are shown.</p>\n");
        }
        else
        {
            sb.Append("<h2>Exposure per channel</h2>\n<table><tr><th class=\"l\">channel</th><th class=\"l\">attack</th><th class=\"l\">quantity</th><th>relative RMSE</th>" +
                      "<th>most exposed household (rel. RMSE)</th><th>prior rel. RMSE</th><th>exposure ratio</th><th>lowest household ratio</th><th>households</th></tr>\n");
            foreach (ChannelSummary s in card.Summaries)
            {
                string cls = s.ExposureRatio < 0.5 ? " class=\"hi\"" : "";
                sb.Append("<tr").Append(cls).Append("><td class=\"l\">").Append(AuditNames.Of(s.Channel)).Append("</td><td class=\"l\">").Append(E(s.Attack))
                  .Append("</td><td class=\"l\">").Append(AuditNames.Of(s.Quantity)).Append("</td><td>").Append(F(s.RelativeRmse)).Append("</td><td>")
                  .Append(F(s.WorstHouseholdRelativeRmse)).Append(" (").Append(E(s.WorstHousehold)).Append(")</td><td>").Append(F(s.PriorRelativeRmse))
                  .Append("</td><td>").Append(F(s.ExposureRatio)).Append("</td><td>").Append(F(s.WorstHouseholdExposureRatio)).Append("</td><td>")
                  .Append(s.Households).Append("</td></tr>\n");
            }
            sb.Append("</table>\n<p>Occupancy (home/away) inferred from the joint base-load estimate: accuracy <b>").Append(F(card.OccupancyAccuracy))
              .Append("</b> against a prior-only guess of ").Append(F(card.PriorOccupancyAccuracy)).Append(".</p>\n");

            // Exposure per channel, per household (base load).
            var series = new List<Series>();
            var groups = card.Households.Where(s => s.Quantity == Quantity.BaseLoad).GroupBy(s => (s.Channel, s.Attack)).ToList();
            int gi = 0;
            foreach (var g in groups)
            {
                var xs = g.Select(s => (double)s.Household + 1).ToArray();
                var ys = g.Select(s => Math.Min(s.ExposureRatio, 2.0)).ToArray();
                series.Add(new Series($"{AuditNames.Of(g.Key.Channel)}: {g.Key.Attack}", xs, ys, SeriesKind.Scatter, Palette.ForIndex(gi++)));
            }
            if (series.Count > 0)
            {
                var chart = new Chart("Base-load exposure ratio per household and channel (capped at 2)", "household (index + 1)", "exposure ratio (attack / prior RMSE)",
                    series, [new ReferenceLine("prior-only guess", 1.0)]) { YRange = new AxisRange(0, 2.05) };
                sb.Append("<h2>Exposure per household</h2>\n").Append(SvgChartRenderer.Render(chart, 1100, 520));
            }
            if (card.MostExposed.Count > 0)
            {
                sb.Append("<h2>True and reconstructed base load of the most exposed households</h2>\n");
                foreach (ExposedTrace tr in card.MostExposed)
                {
                    var xs = Enumerable.Range(0, tr.TrueKw.Length).Select(i => i * 24.0 / view.SlotsPerDay).ToArray();
                    var chart = new Chart($"{tr.HouseholdId}: joint exposure ratio {F(tr.ExposureRatio)}", "time [h]", "base load [kW]",
                    [
                        new Series("true (simulation)", xs, tr.TrueKw, SeriesKind.Step, Palette.Ink),
                        new Series("reconstructed (joint)", xs, tr.ReconstructedKw, SeriesKind.Step, Palette.Rust),
                        new Series("prior mean", xs, tr.PriorKw, SeriesKind.Line, Palette.Sky),
                    ]);
                    sb.Append(SvgChartRenderer.Render(chart, 1100, 380));
                }
            }
            sb.Append("<h2>Households</h2>\n<table><tr><th class=\"l\">household</th><th class=\"l\">bus</th>");
            var cols = card.Summaries.Where(s => s.Quantity == Quantity.BaseLoad).Select(s => (s.Channel, s.Attack)).ToList();
            foreach (var c in cols) sb.Append("<th>").Append(AuditNames.Of(c.Channel)).Append("<br>").Append(E(c.Attack)).Append("</th>");
            sb.Append("<th>occupancy accuracy</th></tr>\n");
            for (int m = 0; m < view.Households.Count; m++)
            {
                HouseholdView h = view.Households[m];
                sb.Append("<tr><td class=\"l\">").Append(E(h.Id)).Append("</td><td class=\"l\">").Append(E(view.BusIds[h.Bus])).Append("</td>");
                foreach (var c in cols)
                {
                    HouseholdScore? s = card.Households.FirstOrDefault(x => x.Household == m && x.Channel == c.Channel && x.Attack == c.Attack && x.Quantity == Quantity.BaseLoad);
                    sb.Append(s is not null && s.ExposureRatio < 0.5 ? "<td class=\"hi\">" : "<td>").Append(s is null ? "–" : F(s.ExposureRatio)).Append("</td>");
                }
                sb.Append("<td>").Append(card.HouseholdOccupancyAccuracy.TryGetValue(h.Id, out double acc) ? F(acc) : "–").Append("</td></tr>\n");
            }
            sb.Append("</table>\n<p>Cells: base-load exposure ratio; highlighted below 0.5.</p>\n");
        }
        sb.Append("<h2>Identifiability (no ground truth needed)</h2>\n<table><tr><th class=\"l\">channel</th><th class=\"l\">attack</th><th>households</th><th>min rank</th><th>unknowns</th>" +
                  "<th>max condition number</th><th>max base-load bound [kW]</th><th class=\"l\">what limits identification (first household)</th></tr>\n");
        foreach (var g in results.Identifiability.GroupBy(i => (i.Channel, i.Attack)))
        {
            sb.Append("<tr><td class=\"l\">").Append(AuditNames.Of(g.Key.Channel)).Append("</td><td class=\"l\">").Append(E(g.Key.Attack)).Append("</td><td>").Append(g.Count())
              .Append("</td><td>").Append(g.Min(i => i.Rank)).Append("</td><td>").Append(g.Max(i => i.Unknowns)).Append("</td><td>")
              .Append(F(g.Select(i => i.ConditionNumber).Where(double.IsFinite).DefaultIfEmpty(double.NaN).Max())).Append("</td><td>")
              .Append(F(g.Select(i => i.BaseLoadBoundStdKw).Where(double.IsFinite).DefaultIfEmpty(double.NaN).Max())).Append("</td><td class=\"l\">")
              .Append(E(g.First().Note)).Append("</td></tr>\n");
        }
        sb.Append("</table>\n");
        if (results.Notes.Count > 0)
        {
            sb.Append("<h2>Notes</h2>\n<ul>\n");
            foreach (string n in results.Notes) sb.Append("<li>").Append(E(n)).Append("</li>\n");
            sb.Append("</ul>\n");
        }
        sb.Append("<div class=\"caution\"><b>Caution.</b> ").Append(E(Caution)).Append("</div>\n</body>\n</html>\n");
        return sb.ToString();
    }

    private static string E(string s) => System.Net.WebUtility.HtmlEncode(s);

    private static string F(double v) => !double.IsFinite(v) ? "–" : v == 0 ? "0" : Math.Abs(v) < 1e-3 || Math.Abs(v) >= 1e4
        ? v.ToString("0.00e+0", CultureInfo.InvariantCulture) : v.ToString("0.000", CultureInfo.InvariantCulture);
}
