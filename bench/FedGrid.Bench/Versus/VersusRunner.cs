using System.Globalization;
using System.Text;
using System.Text.Json;

namespace FedGrid.Bench.Versus;

/// <summary><c>versus-reference [--json] [--repeat N] [--case NAME]</c>: runs every side-by-side case and prints a JSON array or a table.</summary>
internal static class VersusRunner
{
    public static int Run(string[] args)
    {
        bool json = args.Contains("--json");
        int repetitions = 50;
        string? only = null;
        for (int i = 0; i < args.Length - 1; i++)
        {
            if (args[i] == "--repeat") repetitions = int.Parse(args[i + 1], CultureInfo.InvariantCulture);
            if (args[i] == "--case") only = args[i + 1];
        }
        var results = new List<VersusResult>();
        foreach (IVersusCase c in VersusCases.All())
        {
            if (only is not null && c.Name != only) continue;
            Console.Error.WriteLine($"versus-reference: {c.Name} ({repetitions} repetitions each)");
            results.Add(c.Run(repetitions));
        }
        Console.Write(json ? ToJson(results) : ToTable(results));
        return 0;
    }

    private static string ToJson(IReadOnlyList<VersusResult> results)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms, new JsonWriterOptions { Indented = true }))
        {
            w.WriteStartArray();
            foreach (VersusResult r in results)
            {
                w.WriteStartObject();
                w.WriteString("case", r.Case);
                w.WriteNumber("oursMedianMs", r.OursMedianMs);
                Nullable(w, "referenceMedianMs", r.ReferenceMedianMs);
                Nullable(w, "speedup", r.Speedup);
                Nullable(w, "maxObjectiveRelDiff", r.MaxObjectiveRelDiff);
                if (r.Extra is not null)
                    foreach (var (k, v) in r.Extra) w.WriteNumber(k, v);
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

    private static string ToTable(IReadOnlyList<VersusResult> results)
    {
        var inv = CultureInfo.InvariantCulture;
        var sb = new StringBuilder();
        sb.AppendLine(inv, $"{"case",-18} {"ours ms",10} {"reference ms",13} {"speedup",9} {"max rel diff",13}  extra");
        foreach (VersusResult r in results)
        {
            string extra = r.Extra is null ? "" : string.Join(", ", r.Extra.Select(kv => string.Create(inv, $"{kv.Key}={kv.Value:G4}")));
            sb.AppendLine(inv, $"{r.Case,-18} {r.OursMedianMs,10:F4} {Fmt(r.ReferenceMedianMs, "F3"),13} {Fmt(r.Speedup, "F1"),9} {Fmt(r.MaxObjectiveRelDiff, "0.00E+0"),13}  {extra}");
        }
        return sb.ToString();
    }

    private static string Fmt(double? v, string format) => v is { } x ? x.ToString(format, CultureInfo.InvariantCulture) : "n/a";
}
