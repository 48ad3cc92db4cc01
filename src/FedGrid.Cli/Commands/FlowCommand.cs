using System.CommandLine;
using System.Globalization;
using System.Text;
using System.Text.Json;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Cli.Commands;

/// <summary><c>fedgrid flow</c>: exact AC power flow of a feeder file.</summary>
internal static class FlowCommand
{
    public const string Caution =
        "Caution: a simulation for study, not for operating equipment; results are only as good as the feeder data.";

    public static Command Create()
    {
        var feeder = new Option<string>("--feeder") { Description = "feeder file (JSON, format fedgrid-feeder)", Required = true };
        var json = new Option<bool>("--json") { Description = "print one JSON object instead of a table" };
        var cmd = new Command("flow", "Solve the exact AC power flow of a feeder at its file loads and list every limit violation.")
        {
            feeder, json,
        };
        cmd.SetAction(parse => Run(parse.GetValue(feeder)!, parse.GetValue(json), Console.Out));
        return cmd;
    }

    /// <summary>Loads, solves and prints; returns the exit code (0 converged, 1 not converged). Bad files throw <see cref="FeederValidationException"/>.</summary>
    public static int Run(string feederPath, bool asJson, TextWriter output)
    {
        Feeder f = FeederFile.Load(feederPath);
        var flow = new AcPowerFlow(f.Network);
        PowerFlowResult r = flow.SolveBaseCase();
        IReadOnlyList<LimitViolation> violations = r.FindViolations(f);
        output.Write(asJson ? ToJson(f, r, violations) : ToTable(f, r, violations));
        return r.Converged ? CliRunner.ExitOk : CliRunner.ExitFailure;
    }

    internal static string KindName(ViolationKind kind) => kind switch
    {
        ViolationKind.UnderVoltage => "underVoltage",
        ViolationKind.OverVoltage => "overVoltage",
        ViolationKind.LineOverCurrent => "lineOverCurrent",
        ViolationKind.SubstationOverImport => "substationOverImport",
        _ => kind.ToString(),
    };

    private static double LineCurrentA(Feeder f, PowerFlowResult r, int bus) => r.CurrentPu[bus] * f.Network.CurrentBaseA[bus];

    private static string ToJson(Feeder f, PowerFlowResult r, IReadOnlyList<LimitViolation> violations)
    {
        var net = f.Network;
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteString("feeder", f.Name);
            w.WriteBoolean("converged", r.Converged);
            w.WriteNumber("iterations", r.Iterations);
            w.WriteNumber("finalMismatchPu", double.IsFinite(r.FinalMismatchPu) ? r.FinalMismatchPu : -1);
            WriteNumber(w, "totalLossKw", net.ToKw(r.LossPu));
            WriteNumber(w, "totalReactiveLossKvar", net.ToKw(r.ReactiveLossPu));
            WriteNumber(w, "substationImportKw", net.ToKw(r.SubstationPPu));
            WriteNumber(w, "substationImportKvar", net.ToKw(r.SubstationQPu));
            w.WriteNumber("substationImportLimitKw", f.Substation.ImportLimitKw);
            WriteNumber(w, "minVoltagePu", r.MinVoltagePu);
            w.WriteString("minVoltageBus", f.Buses[r.MinVoltageBus].Id);
            w.WriteStartArray("violations");
            foreach (LimitViolation v in violations)
            {
                w.WriteStartObject();
                w.WriteString("kind", KindName(v.Kind));
                w.WriteString("element", v.Element);
                WriteNumber(w, "value", v.Value);
                w.WriteNumber("limit", v.Limit);
                w.WriteString("unit", v.Unit);
                w.WriteEndObject();
            }
            w.WriteEndArray();
            w.WriteStartArray("buses");
            for (int i = 0; i < f.Buses.Count; i++)
            {
                w.WriteStartObject();
                w.WriteString("id", f.Buses[i].Id);
                WriteNumber(w, "voltagePu", r.VoltagePu[i]);
                WriteNumber(w, "angleDeg", r.AngleRad[i] * 180 / Math.PI);
                w.WriteEndObject();
            }
            w.WriteEndArray();
            w.WriteStartArray("lines");
            for (int i = 0; i < f.Buses.Count; i++)
            {
                if (net.Parent[i] < 0) continue;
                Line l = f.Lines[net.ParentLine[i]];
                double amps = LineCurrentA(f, r, i);
                w.WriteStartObject();
                w.WriteString("from", l.From);
                w.WriteString("to", l.To);
                WriteNumber(w, "currentA", amps);
                w.WriteNumber("ampacityA", l.AmpacityA);
                WriteNumber(w, "loadingPercent", 100 * amps / l.AmpacityA);
                WriteNumber(w, "pKw", net.ToKw(r.BranchPPu[i]));
                WriteNumber(w, "qKvar", net.ToKw(r.BranchQPu[i]));
                w.WriteEndObject();
            }
            w.WriteEndArray();
            w.WriteString("caution", Caution);
            w.WriteEndObject();
        }
        return Encoding.UTF8.GetString(ms.GetBuffer(), 0, (int)ms.Length) + Environment.NewLine;
    }

    // JSON has no NaN or infinity: a diverged solve writes null rather than failing.
    private static void WriteNumber(Utf8JsonWriter w, string name, double value)
    {
        if (double.IsFinite(value)) w.WriteNumber(name, value);
        else w.WriteNull(name);
    }

    private static string ToTable(Feeder f, PowerFlowResult r, IReadOnlyList<LimitViolation> violations)
    {
        var net = f.Network;
        var inv = CultureInfo.InvariantCulture;
        var sb = new StringBuilder();
        sb.AppendLine(inv, $"Feeder {f.Name}: {f.Buses.Count} buses, {f.Lines.Count} lines, substation at bus {f.Substation.SlackBus}");
        sb.AppendLine(r.Converged
            ? string.Create(inv, $"AC power flow converged in {r.Iterations} sweeps.")
            : string.Create(inv, $"AC power flow DID NOT CONVERGE after {r.Iterations} sweeps (last change {r.FinalMismatchPu:E2} pu): the loads may have no solution on this feeder; the figures below are not a valid operating point."));
        sb.AppendLine(inv, $"Total loss {net.ToKw(r.LossPu):F2} kW, {net.ToKw(r.ReactiveLossPu):F2} kvar; substation import {net.ToKw(r.SubstationPPu):F2} kW, {net.ToKw(r.SubstationQPu):F2} kvar (limit {f.Substation.ImportLimitKw} kW)");
        sb.AppendLine(inv, $"Minimum voltage {r.MinVoltagePu:F5} pu at bus {f.Buses[r.MinVoltageBus].Id}");
        sb.AppendLine();
        sb.AppendLine("Buses");
        sb.AppendLine(inv, $"  {"bus",-10} {"voltage pu",10} {"angle deg",10} {"limits pu",13}");
        for (int i = 0; i < f.Buses.Count; i++)
        {
            Bus b = f.Buses[i];
            string flag = r.VoltagePu[i] < b.VMinPu - 1e-6 ? "  LOW" : r.VoltagePu[i] > b.VMaxPu + 1e-6 ? "  HIGH" : "";
            sb.AppendLine(inv, $"  {b.Id,-10} {r.VoltagePu[i],10:F5} {r.AngleRad[i] * 180 / Math.PI,10:F3} {b.VMinPu,6:F3}-{b.VMaxPu,-6:F3}{flag}");
        }
        sb.AppendLine();
        sb.AppendLine("Lines");
        sb.AppendLine(inv, $"  {"line",-16} {"current A",10} {"ampacity A",10} {"loading %",9} {"P kW",10} {"Q kvar",10}");
        for (int i = 0; i < f.Buses.Count; i++)
        {
            if (net.Parent[i] < 0) continue;
            Line l = f.Lines[net.ParentLine[i]];
            double amps = LineCurrentA(f, r, i);
            string flag = amps > l.AmpacityA * (1 + 1e-6) ? "  OVER" : "";
            sb.AppendLine(inv, $"  {l.From + "-" + l.To,-16} {amps,10:F2} {l.AmpacityA,10:F0} {100 * amps / l.AmpacityA,9:F1} {net.ToKw(r.BranchPPu[i]),10:F2} {net.ToKw(r.BranchQPu[i]),10:F2}{flag}");
        }
        sb.AppendLine();
        if (violations.Count == 0)
            sb.AppendLine("Violations: none");
        else
        {
            sb.AppendLine(inv, $"Violations: {violations.Count}");
            foreach (LimitViolation v in violations)
                sb.AppendLine(inv, $"  {KindName(v.Kind),-22} {v.Element,-16} {v.Value,12:F4} {v.Unit,-3} limit {v.Limit:G6} {v.Unit}");
        }
        sb.AppendLine();
        sb.AppendLine(Caution);
        return sb.ToString();
    }
}
