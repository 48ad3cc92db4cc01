using System.CommandLine;
using System.Globalization;
using System.Text;
using System.Text.Json;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.PowerFlow;
using FedGrid.Grid.Projection;

namespace FedGrid.Cli.Commands;

/// <summary>
/// <c>fedgrid project</c>: the safety projection of one set of proposed flexible setpoints onto the
/// feeder's limits, checked by the exact AC power flow. Exit code 0 when the result is verified
/// (already feasible or projected), 1 when it is infeasible, unverified or the solver failed, 2 on bad input.
/// </summary>
internal static class ProjectCommand
{
    public static Command Create()
    {
        var feeder = new Option<string>("--feeder") { Description = "feeder file (JSON, format fedgrid-feeder)", Required = true };
        var proposal = new Option<string?>("--proposal") { Description = "proposal CSV: unit,bus,minKw,maxKw,proposalKw[,tanPhi,weight]; base load is the feeder file's bus loads" };
        var seed = new Option<ulong?>("--random-seed") { Description = "draw a seeded synthetic set of flexible units whose proposals overload the feeder" };
        var formulation = new Option<string>("--formulation") { Description = "cone (second-order-cone relaxation, default) or linear (LinDistFlow)", DefaultValueFactory = _ => "cone" };
        var json = new Option<bool>("--json") { Description = "print one JSON object instead of a summary" };
        var cmd = new Command("project", "Project proposed flexible setpoints onto the feeder's voltage, current and substation limits and verify them with the exact AC power flow.")
        {
            feeder, proposal, seed, formulation, json,
        };
        cmd.SetAction(parse => Run(parse.GetValue(feeder)!, parse.GetValue(proposal), parse.GetValue(seed), parse.GetValue(formulation)!, parse.GetValue(json), Console.Out));
        return cmd;
    }

    public static int Run(string feederPath, string? proposalPath, ulong? seed, string formulationName, bool asJson, TextWriter output)
    {
        if ((proposalPath is null) == (seed is null))
            throw new UserInputException("give exactly one of --proposal CSV and --random-seed N");
        IFeederFormulation formulation = formulationName switch
        {
            "cone" => new ConeRelaxationFormulation(),
            "linear" => new LinearisedBranchFlowFormulation(),
            _ => throw new UserInputException($"--formulation must be 'cone' or 'linear', got '{formulationName}'"),
        };
        Feeder f = FeederFile.Load(feederPath);
        IReadOnlyList<FlexibleUnit> units;
        ProjectionInput input;
        if (seed is { } s)
        {
            var set = SyntheticUnitSet.Draw(f, s);
            units = set.Units;
            input = set.Input;
        }
        else
            (units, input) = ProposalCsv.Read(proposalPath!, f);

        ProjectionResult r;
        SetpointProjector projector;
        try
        {
            projector = new SetpointProjector(f, units, formulation);
            r = projector.Project(input);
        }
        catch (ArgumentException e)
        {
            throw new UserInputException($"{proposalPath ?? "--random-seed"}: {e.Message}");
        }
        output.Write(asJson ? ToJson(f, projector, units, input, r) : ToSummary(f, projector, units, input, r));
        return r.Status is ProjectionStatus.AlreadyFeasible or ProjectionStatus.Projected ? CliRunner.ExitOk : CliRunner.ExitFailure;
    }

    internal static string StatusName(ProjectionStatus s) => s switch
    {
        ProjectionStatus.AlreadyFeasible => "already-feasible",
        ProjectionStatus.Projected => "projected",
        ProjectionStatus.Unverified => "unverified",
        ProjectionStatus.Infeasible => "infeasible",
        ProjectionStatus.SolverFailure => "solver-failure",
        _ => s.ToString(),
    };

    private static string ToJson(Feeder f, SetpointProjector p, IReadOnlyList<FlexibleUnit> units, ProjectionInput input, ProjectionResult r)
    {
        var net = f.Network;
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartObject();
            w.WriteString("status", StatusName(r.Status));
            Num(w, "objective", r.Objective);
            Num(w, "maxRelaxationGap", r.MaxRelaxationGap);
            w.WriteBoolean("acVerified", r.AcVerified);
            Num(w, "maxVoltageViolationPuBefore", r.MaxVoltageViolationPuBefore);
            Num(w, "maxVoltageViolationPuAfter", r.MaxVoltageViolationPuAfter);
            Num(w, "solveMs", r.SolveMs);
            w.WriteNumber("iterations", r.Iterations);
            w.WriteString("feeder", f.Name);
            w.WriteString("formulation", p.Formulation.Name);
            w.WriteNumber("units", units.Count);
            w.WriteNumber("attempts", r.Attempts);
            w.WriteString("solverStatus", r.SolverStatus.ToString());
            Num(w, "coneObjective", r.ConeObjective);
            Num(w, "totalMs", r.TotalMs);
            Num(w, "minVoltagePuBefore", r.AcFlowBefore.MinVoltagePu);
            Num(w, "minVoltagePuAfter", r.AcFlow.MinVoltagePu);
            Num(w, "substationImportKwBefore", net.ToKw(r.AcFlowBefore.SubstationPPu));
            Num(w, "substationImportKwAfter", net.ToKw(r.AcFlow.SubstationPPu));
            Num(w, "proposedKw", input.ProposalKw.Sum());
            Num(w, "setpointKw", r.SetpointKw.Sum());
            w.WriteStartArray("bindingLimits");
            foreach (string b in r.BindingLimits) w.WriteStringValue(b);
            w.WriteEndArray();
            w.WriteStartArray("violations");
            foreach (LimitViolation v in r.Violations)
            {
                w.WriteStartObject();
                w.WriteString("kind", FlowCommand.KindName(v.Kind));
                w.WriteString("element", v.Element);
                Num(w, "value", v.Value);
                Num(w, "limit", v.Limit);
                w.WriteString("unit", v.Unit);
                w.WriteEndObject();
            }
            w.WriteEndArray();
            w.WriteStartArray("setpoints");
            for (int u = 0; u < units.Count; u++)
            {
                w.WriteStartObject();
                w.WriteString("unit", units[u].Id);
                w.WriteString("bus", units[u].BusId);
                Num(w, "minKw", input.MinKw[u]);
                Num(w, "maxKw", input.MaxKw[u]);
                Num(w, "proposalKw", input.ProposalKw[u]);
                Num(w, "setpointKw", r.SetpointKw[u]);
                w.WriteEndObject();
            }
            w.WriteEndArray();
            w.WriteString("caution", FlowCommand.Caution);
            w.WriteEndObject();
        }
        return Encoding.UTF8.GetString(ms.ToArray()) + Environment.NewLine;
    }

    private static void Num(Utf8JsonWriter w, string name, double value)
    {
        if (double.IsFinite(value)) w.WriteNumber(name, value);
        else w.WriteNull(name);
    }

    private static string ToSummary(Feeder f, SetpointProjector p, IReadOnlyList<FlexibleUnit> units, ProjectionInput input, ProjectionResult r)
    {
        var c = CultureInfo.InvariantCulture;
        var net = f.Network;
        var sb = new StringBuilder();
        sb.AppendLine(c, $"feeder {f.Name}: {units.Count} flexible units, formulation {p.Formulation.Name}");
        sb.AppendLine(c, $"status            {StatusName(r.Status)}{(r.AcVerified ? " (exact AC check passed)" : " (exact AC check NOT passed)")}");
        sb.AppendLine(c, $"proposed          {input.ProposalKw.Sum():F1} kW, min voltage {r.AcFlowBefore.MinVoltagePu:F4} pu, import {net.ToKw(r.AcFlowBefore.SubstationPPu):F1} kW, worst voltage violation {r.MaxVoltageViolationPuBefore:F4} pu");
        sb.AppendLine(c, $"final             {r.SetpointKw.Sum():F1} kW, min voltage {r.AcFlow.MinVoltagePu:F4} pu, import {net.ToKw(r.AcFlow.SubstationPPu):F1} kW, worst voltage violation {r.MaxVoltageViolationPuAfter:F4} pu");
        sb.AppendLine(c, $"distance          {r.Objective:G6} kW² (weighted), max relaxation gap {r.MaxRelaxationGap:E2}");
        sb.AppendLine(c, $"solver            {r.SolverStatus}, {r.Iterations} iterations in {r.Attempts} solve(s), {r.SolveMs:F2} ms");
        foreach (string b in r.BindingLimits) sb.AppendLine(c, $"binding limit     {b}");
        foreach (LimitViolation v in r.Violations)
            sb.AppendLine(c, $"violation         {FlowCommand.KindName(v.Kind)} at {v.Element}: {v.Value:G6} {v.Unit} (limit {v.Limit:G6})");
        sb.AppendLine(FlowCommand.Caution);
        return sb.ToString();
    }
}

/// <summary>
/// The proposal CSV: a header line <c>unit,bus,minKw,maxKw,proposalKw</c> with optional
/// <c>tanPhi,weight</c> columns, then one row per flexible unit; <c>#</c> lines are comments.
/// </summary>
internal static class ProposalCsv
{
    private static readonly string[] Required = ["unit", "bus", "minKw", "maxKw", "proposalKw"];

    public static (IReadOnlyList<FlexibleUnit> Units, ProjectionInput Input) Read(string path, Feeder feeder)
    {
        string[] lines = File.ReadAllLines(path);
        int header = Array.FindIndex(lines, l => l.Trim().Length > 0 && !l.TrimStart().StartsWith('#'));
        if (header < 0) throw new UserInputException($"{path}: no header line (expected {string.Join(',', Required)}[,tanPhi,weight])");
        string[] cols = lines[header].Split(',').Select(s => s.Trim()).ToArray();
        for (int k = 0; k < Required.Length; k++)
            if (cols.Length <= k || cols[k] != Required[k])
                throw new UserInputException($"{path}: line {header + 1}, column {k + 1}: expected '{Required[k]}', got '{(cols.Length > k ? cols[k] : "")}' (header must be {string.Join(',', Required)}[,tanPhi,weight])");
        int tanCol = Array.IndexOf(cols, "tanPhi"), weightCol = Array.IndexOf(cols, "weight");
        foreach (string col in cols.Skip(Required.Length))
            if (col != "tanPhi" && col != "weight")
                throw new UserInputException($"{path}: line {header + 1}: unknown column '{col}' (optional columns are tanPhi and weight)");
        var units = new List<FlexibleUnit>();
        var rows = new List<(double Min, double Max, double Prop)>();
        for (int i = header + 1; i < lines.Length; i++)
        {
            string line = lines[i];
            if (line.Trim().Length == 0 || line.TrimStart().StartsWith('#')) continue;
            string[] f = line.Split(',').Select(s => s.Trim()).ToArray();
            if (f.Length != cols.Length)
                throw new UserInputException($"{path}: line {i + 1}: {f.Length} fields, the header has {cols.Length}");
            double Num(int k)
            {
                if (!double.TryParse(f[k], NumberStyles.Float, CultureInfo.InvariantCulture, out double v) || !double.IsFinite(v))
                    throw new UserInputException($"{path}: line {i + 1}, column '{cols[k]}': '{f[k]}' is not a finite number");
                return v;
            }
            if (f[0].Length == 0) throw new UserInputException($"{path}: line {i + 1}, column 'unit': empty unit id");
            if (!feeder.TryGetIndex(f[1], out _))
                throw new UserInputException($"{path}: line {i + 1}, column 'bus': feeder '{feeder.Name}' has no bus '{f[1]}'");
            double min = Num(2), max = Num(3), prop = Num(4);
            if (min < 0) throw new UserInputException($"{path}: line {i + 1}, column 'minKw': {min} is negative");
            if (max < min) throw new UserInputException($"{path}: line {i + 1}, column 'maxKw': {max} is below minKw {min}");
            if (prop < min || prop > max) throw new UserInputException($"{path}: line {i + 1}, column 'proposalKw': {prop} is outside [{min}, {max}]");
            double tan = tanCol >= 0 ? Num(tanCol) : 0, weight = weightCol >= 0 ? Num(weightCol) : 1;
            if (weightCol >= 0 && !(weight > 0)) throw new UserInputException($"{path}: line {i + 1}, column 'weight': {weight} must be positive");
            if (units.Any(u => u.Id == f[0])) throw new UserInputException($"{path}: line {i + 1}, column 'unit': duplicate unit id '{f[0]}'");
            units.Add(new FlexibleUnit(f[0], f[1], tan, weight));
            rows.Add((min, max, prop));
        }
        if (units.Count == 0) throw new UserInputException($"{path}: no unit rows after the header");
        var input = new ProjectionInput(feeder.Buses.Count, units.Count);
        for (int b = 0; b < feeder.Buses.Count; b++)
        {
            input.BaseLoadKw[b] = feeder.Buses[b].LoadPkW;
            input.BaseLoadKvar[b] = feeder.Buses[b].LoadQkvar;
        }
        for (int u = 0; u < rows.Count; u++)
        {
            input.MinKw[u] = rows[u].Min;
            input.MaxKw[u] = rows[u].Max;
            input.ProposalKw[u] = rows[u].Prop;
        }
        return (units, input);
    }
}
