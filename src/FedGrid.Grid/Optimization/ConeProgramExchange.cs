using System.Text.Json;

namespace FedGrid.Grid.Optimization;

/// <summary>
/// FedGrid's exchange format for a <see cref="ConeProgram"/>, so that an outside solver can solve
/// the very program FedGrid solves. One JSON object:
/// <code>
/// { "format": "fedgrid-cone-program", "version": 1,
///   "n": 12,                                   // variables
///   "P": { "rows": 12, "cols": 12, "i": [...], "j": [...], "v": [...] },   // upper triangle, 0-based triplets
///   "q": [...],
///   "A": { "rows": p, "cols": n, "i": [...], "j": [...], "v": [...] }, "b": [...],
///   "G": { "rows": m, "cols": n, "i": [...], "j": [...], "v": [...] }, "h": [...],
///   "dims": { "l": 7, "q": [4, 4, ...] },      // orthant dimension, second-order cone sizes
///   "objectiveConstant": 0.0 }
/// </code>
/// meaning: minimise ½xᵀPx + qᵀx + objectiveConstant subject to Ax = b, Gx + s = h, s ∈ K, with P
/// the symmetric matrix whose upper triangle is given and K the orthant of dimension l followed by
/// the second-order cones {(t, u): ‖u‖ ≤ t} of the given sizes, in G's row order. Numbers are
/// written in shortest round-trip form, so a reader gets the exact doubles.
/// </summary>
public static class ConeProgramExchange
{
    /// <summary>Format name written in <c>format</c>.</summary>
    public const string FormatName = "fedgrid-cone-program";

    /// <summary>Writes <paramref name="program"/> as one JSON object.</summary>
    public static void Write(ConeProgram program, Stream stream)
    {
        using var w = new Utf8JsonWriter(stream, new JsonWriterOptions { Indented = false });
        w.WriteStartObject();
        w.WriteString("format", FormatName);
        w.WriteNumber("version", 1);
        w.WriteNumber("n", program.VariableCount);
        WriteMatrix(w, "P", program.P);
        WriteVector(w, "q", program.Q);
        WriteMatrix(w, "A", program.A);
        WriteVector(w, "b", program.B);
        WriteMatrix(w, "G", program.G);
        WriteVector(w, "h", program.H);
        w.WriteStartObject("dims");
        w.WriteNumber("l", program.Cones.Nonnegative);
        w.WriteStartArray("q");
        foreach (int k in program.Cones.SecondOrder) w.WriteNumberValue(k);
        w.WriteEndArray();
        w.WriteEndObject();
        w.WriteNumber("objectiveConstant", program.ObjectiveConstant);
        w.WriteEndObject();
    }

    /// <summary>Writes <paramref name="program"/> to a file.</summary>
    public static void WriteFile(ConeProgram program, string path)
    {
        using var f = File.Create(path);
        Write(program, f);
    }

    /// <summary>Reads a program written by <see cref="Write"/>.</summary>
    /// <exception cref="FormatException">Not this format, or a field is missing or malformed (the message names the JSON path).</exception>
    public static ConeProgram Read(Stream stream)
    {
        using var doc = JsonDocument.Parse(stream);
        var root = doc.RootElement;
        if (!root.TryGetProperty("format", out var f) || f.GetString() != FormatName)
            throw new FormatException($"$.format: expected \"{FormatName}\"");
        int n = Int(root, "n", "$.n");
        var p = ReadMatrix(root, "P", n, n);
        var a = ReadMatrix(root, "A", -1, n);
        var g = ReadMatrix(root, "G", -1, n);
        var q = ReadVector(root, "q");
        var b = ReadVector(root, "b");
        var h = ReadVector(root, "h");
        if (!root.TryGetProperty("dims", out var dims)) throw new FormatException("$.dims: missing");
        int l = Int(dims, "l", "$.dims.l");
        var socs = dims.TryGetProperty("q", out var sq) ? sq.EnumerateArray().Select(e => e.GetInt32()).ToArray() : [];
        double c0 = root.TryGetProperty("objectiveConstant", out var oc) ? oc.GetDouble() : 0;
        return new ConeProgram(p, q, a, b, g, h, new ConeDimensions(l, socs), c0);
    }

    private static int Int(JsonElement e, string name, string path) =>
        e.TryGetProperty(name, out var v) && v.ValueKind == JsonValueKind.Number ? v.GetInt32() : throw new FormatException($"{path}: missing or not a number");

    private static double[] ReadVector(JsonElement root, string name)
    {
        if (!root.TryGetProperty(name, out var v) || v.ValueKind != JsonValueKind.Array) throw new FormatException($"$.{name}: missing or not an array");
        return v.EnumerateArray().Select(e => e.GetDouble()).ToArray();
    }

    private static SparseMatrix ReadMatrix(JsonElement root, string name, int rows, int cols)
    {
        if (!root.TryGetProperty(name, out var m)) throw new FormatException($"$.{name}: missing");
        int r = Int(m, "rows", $"$.{name}.rows"), c = Int(m, "cols", $"$.{name}.cols");
        if ((rows >= 0 && r != rows) || c != cols) throw new FormatException($"$.{name}: shape {r}×{c} does not fit n = {cols}");
        int[] Ints(string k) => m.TryGetProperty(k, out var a) ? a.EnumerateArray().Select(e => e.GetInt32()).ToArray() : throw new FormatException($"$.{name}.{k}: missing");
        var vals = m.TryGetProperty("v", out var va) ? va.EnumerateArray().Select(e => e.GetDouble()).ToArray() : throw new FormatException($"$.{name}.v: missing");
        return SparseMatrix.FromTriplets(r, c, Ints("i"), Ints("j"), vals);
    }

    private static void WriteVector(Utf8JsonWriter w, string name, ReadOnlySpan<double> v)
    {
        w.WriteStartArray(name);
        foreach (double d in v) w.WriteNumberValue(d);
        w.WriteEndArray();
    }

    private static void WriteMatrix(Utf8JsonWriter w, string name, SparseMatrix m)
    {
        w.WriteStartObject(name);
        w.WriteNumber("rows", m.RowCount);
        w.WriteNumber("cols", m.ColumnCount);
        var cp = m.ColumnPointers;
        var ri = m.RowIndices;
        w.WriteStartArray("i");
        for (int k = 0; k < ri.Length; k++) w.WriteNumberValue(ri[k]);
        w.WriteEndArray();
        w.WriteStartArray("j");
        for (int j = 0; j < m.ColumnCount; j++)
            for (int k = cp[j]; k < cp[j + 1]; k++) w.WriteNumberValue(j);
        w.WriteEndArray();
        w.WriteStartArray("v");
        foreach (double d in m.Values) w.WriteNumberValue(d);
        w.WriteEndArray();
        w.WriteEndObject();
    }
}
