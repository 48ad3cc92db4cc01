using System.Buffers;
using System.Text;
using System.Text.Json;

namespace FedGrid.Grid.Feeders;

/// <summary>
/// Reads and writes feeder files: FedGrid's own JSON format (<c>"format": "fedgrid-feeder"</c>,
/// <c>"version": 1</c>). Top level: <c>format</c>, <c>version</c>, <c>name</c>, optional <c>source</c>
/// and <c>notes</c> (array of strings), <c>baseMva</c>, <c>substation</c> {<c>bus</c>, <c>voltagePu</c>,
/// <c>importLimitKw</c>}, <c>buses</c> [{<c>id</c>, optional <c>name</c>, <c>baseKv</c>, optional
/// <c>loadKw</c> and <c>loadKvar</c> (default 0), <c>vMinPu</c>, <c>vMaxPu</c>}] and <c>lines</c>
/// [{<c>from</c>, <c>to</c>, <c>rOhm</c>, <c>xOhm</c>, <c>ampacityA</c>}]. Unknown fields are errors.
/// Uses <see cref="JsonDocument"/> and <see cref="Utf8JsonWriter"/> only (trimming and AOT safe).
/// Every problem is reported through <see cref="FeederValidationException"/> with the file name
/// and a JSON path such as <c>$.lines[3].to</c>.
/// </summary>
public static class FeederFile
{
    /// <summary>The value of the top-level <c>format</c> field.</summary>
    public const string FormatName = "fedgrid-feeder";

    /// <summary>The format version this code reads and writes.</summary>
    public const int CurrentVersion = 1;

    private static readonly string[] TopFields = ["format", "version", "name", "source", "notes", "baseMva", "substation", "buses", "lines"];
    private static readonly string[] SubstationFields = ["bus", "voltagePu", "importLimitKw"];
    private static readonly string[] BusFields = ["id", "name", "baseKv", "loadKw", "loadKvar", "vMinPu", "vMaxPu"];
    private static readonly string[] LineFields = ["from", "to", "rOhm", "xOhm", "ampacityA"];

    /// <summary>Reads and validates a feeder file.</summary>
    /// <exception cref="FeederValidationException">The file cannot be read, is not valid JSON, or describes an unusable feeder.</exception>
    public static Feeder Load(string path)
    {
        string text;
        try
        {
            text = File.ReadAllText(path, Encoding.UTF8);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or ArgumentException or NotSupportedException)
        {
            string why = e is FileNotFoundException or DirectoryNotFoundException ? "file not found" : "cannot read the file: " + e.Message;
            throw new FeederValidationException([new FeederProblem(path, why)]);
        }
        return Parse(text, path);
    }

    /// <summary>Parses and validates feeder-file text; <paramref name="fileName"/> prefixes every error location.</summary>
    /// <exception cref="FeederValidationException">The text is not valid JSON or describes an unusable feeder.</exception>
    public static Feeder Parse(string text, string? fileName = null)
    {
        ArgumentNullException.ThrowIfNull(text);
        string prefix = fileName is null ? "" : fileName + ": ";
        JsonDocument doc;
        try
        {
            doc = JsonDocument.Parse(text, new JsonDocumentOptions { CommentHandling = JsonCommentHandling.Disallow, MaxDepth = 64 });
        }
        catch (JsonException e)
        {
            long line = (e.LineNumber ?? 0) + 1;
            long col = (e.BytePositionInLine ?? 0) + 1;
            string what = e.Message;
            int cut = what.IndexOf(" LineNumber:", StringComparison.Ordinal);
            if (cut > 0) what = what[..cut].TrimEnd();
            throw new FeederValidationException([new FeederProblem($"{prefix}line {line}, byte {col}", $"malformed JSON: {what}")]);
        }
        using (doc)
        {
            var reader = new Reader(prefix);
            return reader.ReadFeeder(doc.RootElement, fileName);
        }
    }

    /// <summary>Writes a feeder as a feeder file (UTF-8, indented, one bus or line per text line).</summary>
    public static void Write(Feeder feeder, Stream stream)
    {
        ArgumentNullException.ThrowIfNull(feeder);
        ArgumentNullException.ThrowIfNull(stream);
        using var w = new Utf8JsonWriter(stream, new JsonWriterOptions { Indented = true });
        var item = new ArrayBufferWriter<byte>(256);
        w.WriteStartObject();
        w.WriteString("format", FormatName);
        w.WriteNumber("version", CurrentVersion);
        w.WriteString("name", feeder.Name);
        if (feeder.Source is not null) w.WriteString("source", feeder.Source);
        if (feeder.Notes.Count > 0)
        {
            w.WriteStartArray("notes");
            foreach (string note in feeder.Notes) w.WriteStringValue(note);
            w.WriteEndArray();
        }
        w.WriteNumber("baseMva", feeder.BaseMva);
        w.WritePropertyName("substation");
        WriteCompact(w, item, iw =>
        {
            iw.WriteString("bus", feeder.Substation.SlackBus);
            iw.WriteNumber("voltagePu", feeder.Substation.VoltageSetpointPu);
            iw.WriteNumber("importLimitKw", feeder.Substation.ImportLimitKw);
        });
        w.WriteStartArray("buses");
        foreach (Bus b in feeder.Buses)
        {
            WriteCompact(w, item, iw =>
            {
                iw.WriteString("id", b.Id);
                iw.WriteString("name", b.Name);
                iw.WriteNumber("baseKv", b.BaseKv);
                iw.WriteNumber("loadKw", b.LoadPkW);
                iw.WriteNumber("loadKvar", b.LoadQkvar);
                iw.WriteNumber("vMinPu", b.VMinPu);
                iw.WriteNumber("vMaxPu", b.VMaxPu);
            });
        }
        w.WriteEndArray();
        w.WriteStartArray("lines");
        foreach (Line l in feeder.Lines)
        {
            WriteCompact(w, item, iw =>
            {
                iw.WriteString("from", l.From);
                iw.WriteString("to", l.To);
                iw.WriteNumber("rOhm", l.ROhm);
                iw.WriteNumber("xOhm", l.XOhm);
                iw.WriteNumber("ampacityA", l.AmpacityA);
            });
        }
        w.WriteEndArray();
        w.WriteEndObject();
        w.Flush();
        stream.WriteByte((byte)'\n');
    }

    /// <summary>Writes a feeder file to <paramref name="path"/>, replacing any existing file.</summary>
    public static void Write(Feeder feeder, string path)
    {
        using var fs = new FileStream(path, FileMode.Create, FileAccess.Write, FileShare.None);
        Write(feeder, fs);
    }

    /// <summary>The feeder-file text of a feeder.</summary>
    public static string ToJson(Feeder feeder)
    {
        using var ms = new MemoryStream();
        Write(feeder, ms);
        return Encoding.UTF8.GetString(ms.GetBuffer(), 0, (int)ms.Length);
    }

    private static void WriteCompact(Utf8JsonWriter outer, ArrayBufferWriter<byte> buffer, Action<Utf8JsonWriter> body)
    {
        buffer.Clear();
        using (var iw = new Utf8JsonWriter(buffer))
        {
            iw.WriteStartObject();
            body(iw);
            iw.WriteEndObject();
        }
        outer.WriteRawValue(buffer.WrittenSpan, skipInputValidation: true);
    }

    /// <summary>Walks the document, collecting structural problems (missing fields, wrong types, unknown fields).</summary>
    private sealed class Reader(string prefix)
    {
        private readonly List<FeederProblem> _problems = [];

        private void Add(string path, string message) => _problems.Add(new FeederProblem(prefix + path, message));

        public Feeder ReadFeeder(JsonElement root, string? fileName)
        {
            if (root.ValueKind != JsonValueKind.Object)
                throw new FeederValidationException([new FeederProblem(prefix + "$", $"expected a JSON object at the top level, got {Describe(root.ValueKind)}")]);
            string? format = ReadString(root, "$", "format", required: true);
            if (format is not null && format != FormatName)
                Add("$.format", $"expected \"{FormatName}\", got \"{format}\" (not a FedGrid feeder file)");
            double? version = ReadNumber(root, "$", "version", required: true);
            if (version is { } v && v != CurrentVersion)
                Add("$.version", $"unsupported version {v}; this reader knows version {CurrentVersion}");
            if (_problems.Count > 0) throw new FeederValidationException(_problems); // not our format: say only that
            CheckFields(root, "$", TopFields);

            string name = ReadString(root, "$", "name", required: true) ?? "";
            string? source = ReadString(root, "$", "source", required: false);
            var notes = new List<string>();
            if (Field(root, "$", "notes", JsonValueKind.Array, required: false) is { } notesEl)
            {
                int k = 0;
                foreach (JsonElement n in notesEl.EnumerateArray())
                {
                    if (n.ValueKind == JsonValueKind.String) notes.Add(n.GetString()!);
                    else Add($"$.notes[{k}]", $"expected a string, got {Describe(n.ValueKind)}");
                    k++;
                }
            }
            double baseMva = ReadNumber(root, "$", "baseMva", required: true) ?? double.NaN;

            Substation? substation = null;
            if (Field(root, "$", "substation", JsonValueKind.Object, required: false, reportWrongType: true) is { } subEl)
            {
                CheckFields(subEl, "$.substation", SubstationFields);
                string? bus = ReadString(subEl, "$.substation", "bus", required: true);
                double? vpu = ReadNumber(subEl, "$.substation", "voltagePu", required: true);
                double? imp = ReadNumber(subEl, "$.substation", "importLimitKw", required: true);
                substation = new Substation(bus ?? "", vpu ?? double.NaN, imp ?? double.NaN);
            }

            var buses = new List<Bus>();
            if (Field(root, "$", "buses", JsonValueKind.Array, required: true) is { } busesEl)
            {
                int i = 0;
                foreach (JsonElement b in busesEl.EnumerateArray())
                {
                    string at = $"$.buses[{i++}]";
                    if (b.ValueKind != JsonValueKind.Object)
                    {
                        Add(at, $"expected a bus object, got {Describe(b.ValueKind)}");
                        continue;
                    }
                    CheckFields(b, at, BusFields);
                    string id = ReadString(b, at, "id", required: true) ?? "";
                    string busName = ReadString(b, at, "name", required: false) ?? id;
                    double baseKv = ReadNumber(b, at, "baseKv", required: true) ?? double.NaN;
                    double p = ReadNumber(b, at, "loadKw", required: false) ?? 0;
                    double q = ReadNumber(b, at, "loadKvar", required: false) ?? 0;
                    double vmin = ReadNumber(b, at, "vMinPu", required: true) ?? double.NaN;
                    double vmax = ReadNumber(b, at, "vMaxPu", required: true) ?? double.NaN;
                    buses.Add(new Bus(id, busName, baseKv, p, q, vmin, vmax));
                }
            }

            var lines = new List<Line>();
            if (Field(root, "$", "lines", JsonValueKind.Array, required: true) is { } linesEl)
            {
                int k = 0;
                foreach (JsonElement l in linesEl.EnumerateArray())
                {
                    string at = $"$.lines[{k++}]";
                    if (l.ValueKind != JsonValueKind.Object)
                    {
                        Add(at, $"expected a line object, got {Describe(l.ValueKind)}");
                        continue;
                    }
                    CheckFields(l, at, LineFields);
                    string from = ReadString(l, at, "from", required: true) ?? "";
                    string to = ReadString(l, at, "to", required: true) ?? "";
                    double r = ReadNumber(l, at, "rOhm", required: true) ?? double.NaN;
                    double x = ReadNumber(l, at, "xOhm", required: true) ?? double.NaN;
                    double amp = ReadNumber(l, at, "ampacityA", required: true) ?? double.NaN;
                    lines.Add(new Line(from, to, r, x, amp));
                }
            }

            if (_problems.Count > 0) throw new FeederValidationException(_problems);
            return Feeder.CreateChecked(name, buses, lines, substation, baseMva, source, fileName, notes);
        }

        private void CheckFields(JsonElement obj, string at, string[] known)
        {
            var seen = new HashSet<string>(StringComparer.Ordinal);
            foreach (JsonProperty prop in obj.EnumerateObject())
            {
                if (Array.IndexOf(known, prop.Name) < 0)
                    Add($"{at}.{prop.Name}", $"unknown field '{prop.Name}' (known here: {string.Join(", ", known)})");
                else if (!seen.Add(prop.Name))
                    Add($"{at}.{prop.Name}", $"field '{prop.Name}' appears more than once");
            }
        }

        private JsonElement? Field(JsonElement obj, string at, string name, JsonValueKind kind, bool required, bool reportWrongType = true)
        {
            if (!obj.TryGetProperty(name, out JsonElement el))
            {
                if (required) Add($"{at}.{name}", $"missing required field '{name}'");
                return null;
            }
            if (el.ValueKind != kind)
            {
                if (reportWrongType)
                    Add($"{at}.{name}", $"expected {Describe(kind)}, got {Describe(el.ValueKind)}");
                return null;
            }
            return el;
        }

        private string? ReadString(JsonElement obj, string at, string name, bool required) =>
            Field(obj, at, name, JsonValueKind.String, required) is { } el ? el.GetString() : null;

        private double? ReadNumber(JsonElement obj, string at, string name, bool required)
        {
            if (Field(obj, at, name, JsonValueKind.Number, required) is not { } el) return null;
            if (!el.TryGetDouble(out double d) || !double.IsFinite(d))
            {
                Add($"{at}.{name}", $"number {el.GetRawText()} is out of range");
                return null;
            }
            return d;
        }

        private static string Describe(JsonValueKind kind) => kind switch
        {
            JsonValueKind.Object => "an object",
            JsonValueKind.Array => "an array",
            JsonValueKind.String => "a string",
            JsonValueKind.Number => "a number",
            JsonValueKind.True or JsonValueKind.False => "a boolean",
            JsonValueKind.Null => "null",
            _ => "nothing",
        };
    }
}
