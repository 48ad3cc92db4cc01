using System.Collections.Immutable;
using System.Globalization;
using FedGrid.Households.Scenarios;

namespace FedGrid.Households.Data;

/// <summary>One bad value in a meter-data file.</summary>
/// <param name="File">File name (or "&lt;text&gt;").</param>
/// <param name="Row">Line number in the file (the header's included), or 0 for a problem of the whole file.</param>
/// <param name="Column">Column name (or number when the header is unusable).</param>
/// <param name="Message">What is wrong.</param>
public sealed record MeterDataProblem(string File, int Row, string Column, string Message)
{
    /// <inheritdoc />
    public override string ToString() => Row > 0 ? $"{File}: row {Row}, column {Column}: {Message}" : $"{File}: column {Column}: {Message}";
}

/// <summary>A meter-data file that cannot be used; lists every problem found (up to 50).</summary>
public sealed class MeterDataException : Exception
{
    /// <summary>Creates the exception from the problems found.</summary>
    public MeterDataException(IReadOnlyList<MeterDataProblem> problems) : base(Format(problems)) => Problems = problems;

    /// <summary>The problems in file order.</summary>
    public IReadOnlyList<MeterDataProblem> Problems { get; }

    private static string Format(IReadOnlyList<MeterDataProblem> p) =>
        p.Count == 1 ? $"invalid meter data: {p[0]}"
            : $"invalid meter data ({p.Count} problems):{Environment.NewLine}  " + string.Join(Environment.NewLine + "  ", p);
}

/// <summary>Measured series of one household.</summary>
/// <param name="HouseholdId">Household id as in the file.</param>
/// <param name="BaseKw">Base load per slot, kW.</param>
/// <param name="Occupied">Occupancy per slot, or default when the file has no <c>occupied</c> column.</param>
public sealed record MeasuredHousehold(string HouseholdId, ImmutableArray<double> BaseKw, ImmutableArray<bool> Occupied);

/// <summary>Meter data read from a CSV file: households in order of first appearance, all over the same slots.</summary>
/// <param name="SlotCount">Slots covered, from slot 0.</param>
/// <param name="FirstDay">Day of the week of slot 0 when the file used timestamps, else null.</param>
/// <param name="Households">The households.</param>
public sealed record MeterData(int SlotCount, DayOfWeek? FirstDay, ImmutableArray<MeasuredHousehold> Households)
{
    /// <summary>
    /// The scenario with each listed household's base load (and occupancy, when measured) replaced by the measured
    /// series. Other parts of the traces (hot-water draws, sessions, curtailable profile) stay as they are.
    /// </summary>
    /// <exception cref="ArgumentException">A household is not in the scenario or the horizons differ.</exception>
    public Scenario ApplyTo(Scenario scenario)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        if (scenario.SlotCount != SlotCount)
            throw new ArgumentException($"meter data covers {SlotCount} slots, scenario '{scenario.Name}' has {scenario.SlotCount}");
        var traces = scenario.Traces.ToBuilder();
        foreach (MeasuredHousehold m in Households)
        {
            int i = -1;
            for (int k = 0; k < scenario.Households.Length; k++)
                if (scenario.Households[k].Id == m.HouseholdId) { i = k; break; }
            if (i < 0) throw new ArgumentException($"meter data for household '{m.HouseholdId}', which scenario '{scenario.Name}' does not have");
            traces[i] = traces[i] with { BaseKw = m.BaseKw, Occupied = m.Occupied.IsDefault ? traces[i].Occupied : m.Occupied };
        }
        return scenario with { Traces = traces.MoveToImmutable() };
    }
}

/// <summary>
/// Reads measured household data from CSV. Layout (our own): a header line, comma-separated,
/// columns by name in any order —
/// <c>household</c> (id, required); exactly one of <c>slot</c> (integer from 0, 15-minute slots) or
/// <c>timestamp</c> (local time <c>yyyy-MM-ddTHH:mm</c> on a quarter hour; the earliest must be a midnight
/// and becomes slot 0); <c>baseKw</c> (base load, kW, ≥ 0, required); <c>occupied</c> (optional: 1/0 or true/false).
/// Every household must have every slot from 0 to the last exactly once; the horizon must be whole days, at most 366.
/// Lines starting with <c>#</c> and blank lines are skipped. Each bad value is reported with its file, row and column.
/// </summary>
public static class MeterDataCsv
{
    private static readonly string[] Known = ["household", "slot", "timestamp", "baseKw", "occupied"];
    private const int MaxProblems = 50;
    private const long MaxSlots = 366L * SlotCalendar.SlotsPerDay;

    /// <summary>Reads a file.</summary>
    /// <exception cref="MeterDataException">The file is missing or has bad values.</exception>
    public static MeterData Load(string path)
    {
        string text;
        try
        {
            text = File.ReadAllText(path);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or ArgumentException or NotSupportedException)
        {
            throw new MeterDataException([new MeterDataProblem(path, 0, "-", e is FileNotFoundException or DirectoryNotFoundException ? "file not found" : e.Message)]);
        }
        return Parse(text, path);
    }

    /// <summary>Parses CSV text; <paramref name="fileName"/> names it in errors.</summary>
    /// <exception cref="MeterDataException">Bad values.</exception>
    public static MeterData Parse(string text, string fileName = "<text>")
    {
        ArgumentNullException.ThrowIfNull(text);
        var problems = new List<MeterDataProblem>();
        void Bad(int row, string col, string msg)
        {
            if (problems.Count < MaxProblems) problems.Add(new MeterDataProblem(fileName, row, col, msg));
        }
        string[] lines = text.Replace("\r\n", "\n").Split('\n');
        int headerRow = -1;
        for (int k = 0; k < lines.Length; k++)
            if (lines[k].Trim().Length > 0 && !lines[k].TrimStart().StartsWith('#')) { headerRow = k; break; }
        if (headerRow < 0) throw new MeterDataException([new MeterDataProblem(fileName, 1, "-", "no header line: expected e.g. household,slot,baseKw,occupied")]);

        string[] header = lines[headerRow].Split(',').Select(h => h.Trim()).ToArray();
        var col = new Dictionary<string, int>(StringComparer.Ordinal);
        for (int c = 0; c < header.Length; c++)
        {
            if (Array.IndexOf(Known, header[c]) < 0) Bad(headerRow + 1, $"{c + 1}", $"unknown column '{header[c]}' (known: {string.Join(", ", Known)})");
            else if (!col.TryAdd(header[c], c)) Bad(headerRow + 1, header[c], "column appears twice");
        }
        foreach (string need in (string[])["household", "baseKw"])
            if (!col.ContainsKey(need)) Bad(headerRow + 1, need, "required column is missing");
        bool bySlot = col.ContainsKey("slot"), byTime = col.ContainsKey("timestamp");
        if (bySlot == byTime) Bad(headerRow + 1, "slot/timestamp", "need exactly one of the columns 'slot' and 'timestamp'");
        if (problems.Count > 0) throw new MeterDataException(problems);
        bool hasOcc = col.ContainsKey("occupied");

        var rows = new List<(int Row, string Id, long Slot, double Kw, bool Occ)>();
        var stamps = new List<(int Row, DateTime Time)>();
        for (int k = headerRow + 1; k < lines.Length; k++)
        {
            string line = lines[k];
            if (line.Trim().Length == 0 || line.TrimStart().StartsWith('#')) continue;
            int row = k + 1;
            string[] f = line.Split(',');
            if (f.Length != header.Length)
            {
                Bad(row, "-", $"{f.Length} fields, header has {header.Length}");
                continue;
            }
            string id = f[col["household"]].Trim();
            if (id.Length == 0) Bad(row, "household", "empty household id");
            long slot = -1;
            if (bySlot)
            {
                string s = f[col["slot"]].Trim();
                if (!long.TryParse(s, NumberStyles.None, CultureInfo.InvariantCulture, out slot))
                {
                    Bad(row, "slot", $"'{s}' is not a slot number (integer ≥ 0)");
                    slot = -1;
                }
                else if (slot >= MaxSlots)
                {
                    Bad(row, "slot", $"slot {s} lies beyond 366 days ({MaxSlots} slots)");
                    slot = -1;
                }
            }
            else
            {
                string s = f[col["timestamp"]].Trim();
                if (!DateTime.TryParseExact(s, "yyyy-MM-dd'T'HH:mm", CultureInfo.InvariantCulture, DateTimeStyles.None, out DateTime time))
                    Bad(row, "timestamp", $"'{s}' is not a local time yyyy-MM-ddTHH:mm");
                else if (time.Minute % 15 != 0)
                    Bad(row, "timestamp", $"'{s}' is not on a quarter hour");
                else stamps.Add((row, time));
                slot = stamps.Count > 0 && stamps[^1].Row == row ? 0 : -1;
            }
            string kwText = f[col["baseKw"]].Trim();
            if (!double.TryParse(kwText, NumberStyles.Float, CultureInfo.InvariantCulture, out double kw) || !double.IsFinite(kw))
                Bad(row, "baseKw", $"'{kwText}' is not a number");
            else if (kw < 0)
                Bad(row, "baseKw", $"base load must be ≥ 0 kW, got {kwText}");
            else if (kw > 1000)
                Bad(row, "baseKw", $"base load of {kwText} kW is not a household's");
            bool occ = false;
            if (hasOcc)
            {
                string o = f[col["occupied"]].Trim().ToLowerInvariant();
                if (o is "1" or "true") occ = true;
                else if (o is not ("0" or "false")) Bad(row, "occupied", $"'{f[col["occupied"]].Trim()}' is not 1, 0, true or false");
            }
            rows.Add((row, id, slot, kw, occ));
        }
        if (rows.Count == 0 && problems.Count == 0) Bad(headerRow + 1, "-", "no data rows");
        if (problems.Count > 0) throw new MeterDataException(problems);

        DayOfWeek? firstDay = null;
        if (byTime)
        {
            DateTime t0 = stamps.Min(s => s.Time);
            if (t0.TimeOfDay != TimeSpan.Zero)
                throw new MeterDataException([new MeterDataProblem(fileName, stamps.First(s => s.Time == t0).Row, "timestamp", $"the earliest timestamp {t0:yyyy-MM-dd'T'HH:mm} must be a midnight (it becomes slot 0)")]);
            firstDay = t0.DayOfWeek;
            var bySlotRow = stamps.ToDictionary(s => s.Row, s => (long)((s.Time - t0).TotalMinutes / 15));
            foreach (var (row, time) in stamps)
                if (bySlotRow[row] >= MaxSlots) Bad(row, "timestamp", $"{time:yyyy-MM-dd'T'HH:mm} lies more than 366 days after the first timestamp");
            if (problems.Count > 0) throw new MeterDataException(problems);
            for (int k = 0; k < rows.Count; k++) rows[k] = rows[k] with { Slot = bySlotRow[rows[k].Row] };
        }

        long last = rows.Max(r => r.Slot);
        int n = (int)last + 1;
        if (n % SlotCalendar.SlotsPerDay != 0)
            Bad(rows.First(r => r.Slot == last).Row, bySlot ? "slot" : "timestamp",
                $"data end at slot {last}; the horizon must be whole days ({SlotCalendar.SlotsPerDay} slots each)");
        var order = new List<string>();
        var series = new Dictionary<string, (double[] Kw, bool[] Occ, int[] RowOf)>(StringComparer.Ordinal);
        foreach (var r in rows)
        {
            if (!series.TryGetValue(r.Id, out var s))
            {
                s = (new double[n], new bool[n], new int[n]);
                series[r.Id] = s;
                order.Add(r.Id);
            }
            if (s.RowOf[r.Slot] != 0)
            {
                Bad(r.Row, bySlot ? "slot" : "timestamp", $"household '{r.Id}' has slot {r.Slot} already at row {s.RowOf[r.Slot]}");
                continue;
            }
            s.RowOf[r.Slot] = r.Row;
            s.Kw[r.Slot] = r.Kw;
            s.Occ[r.Slot] = r.Occ;
        }
        foreach (string id in order)
        {
            int missing = Array.IndexOf(series[id].RowOf, 0);
            if (missing >= 0)
            {
                int count = series[id].RowOf.Count(x => x == 0);
                Bad(0, bySlot ? "slot" : "timestamp", $"household '{id}' has no value for slot {missing}" + (count > 1 ? $" and {count - 1} other slots" : "") + $" of 0..{n - 1}");
            }
        }
        if (problems.Count > 0) throw new MeterDataException(problems);
        var households = order.Select(id => new MeasuredHousehold(id, [.. series[id].Kw], hasOcc ? [.. series[id].Occ] : default)).ToImmutableArray();
        return new MeterData(n, firstDay, households);
    }
}
