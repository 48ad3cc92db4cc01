using System.Collections.Immutable;
using System.Globalization;
using System.Text;
using System.Text.Json;
using FedGrid.Grid.Feeders;
using FedGrid.Households.Data;
using FedGrid.Households.Tariffs;

namespace FedGrid.Households.Scenarios;

/// <summary>One problem in a scenario file.</summary>
/// <param name="Location">File name and JSON path, e.g. <c>s.json: $.households[3].appliances[0].maxKw</c>.</param>
/// <param name="Message">What is wrong.</param>
public sealed record ScenarioProblem(string Location, string Message)
{
    /// <inheritdoc />
    public override string ToString() => $"{Location}: {Message}";
}

/// <summary>A scenario file that cannot be used; lists every problem found.</summary>
public sealed class ScenarioFileException : Exception
{
    /// <summary>Creates the exception.</summary>
    public ScenarioFileException(IReadOnlyList<ScenarioProblem> problems) : base(Format(problems)) => Problems = problems;

    /// <summary>The problems in the order found.</summary>
    public IReadOnlyList<ScenarioProblem> Problems { get; }

    private static string Format(IReadOnlyList<ScenarioProblem> p) =>
        p.Count == 1 ? $"invalid scenario: {p[0]}"
            : $"invalid scenario ({p.Count} problems):{Environment.NewLine}  " + string.Join(Environment.NewLine + "  ", p);
}

/// <summary>
/// Scenario files: FedGrid's own JSON format (<c>"format": "fedgrid-scenario"</c>, <c>"version": 1</c>). They hold the
/// parameters of a scenario, not its traces: loading draws the traces from <c>seed</c> for <c>days</c> days with
/// <see cref="SyntheticData"/>, then, when <c>meterData</c> names a CSV file (<see cref="MeterDataCsv"/>, path relative
/// to the scenario file), replaces base load and occupancy by the measured series.
/// Top level: <c>format</c>, <c>version</c>, <c>name</c>, <c>seed</c>, <c>days</c>, <c>firstDay</c> ("Monday"…),
/// <c>feeder</c> (<c>"builtin:demo-lv"</c> or a feeder-file path relative to the scenario file), <c>fixedLoads</c>
/// [{<c>bus</c>, <c>kw</c>, <c>kvar</c>}], <c>tariff</c>, <c>households</c>, optional <c>meterData</c>.
/// Tariff: {<c>kind</c>: "time-of-use", <c>name</c>, <c>defaultPeriod</c>, <c>defaultPrice</c>, <c>weekday</c> and
/// <c>weekend</c>: [{<c>name</c>, <c>start</c> "HH:MM", <c>end</c> "HH:MM", <c>price</c>}]} or {<c>kind</c>: "real-time",
/// <c>name</c>, <c>seed</c>, <c>basePrice</c>, <c>morningHump</c>, <c>eveningHump</c>, <c>reversion</c>, <c>volatility</c>,
/// <c>spikeProbability</c>, <c>spikeMean</c>, <c>spikeDecay</c>, <c>floor</c>} (prices in $ per kWh).
/// Household: {<c>id</c>, <c>bus</c>, <c>powerFactor</c>, <c>baseLoad</c> {<c>standbyKw</c>, <c>morningKw</c>,
/// <c>daytimeKw</c>, <c>eveningKw</c>, <c>noise</c>}, <c>occupancy</c> {<c>wake</c>, <c>leave</c>, <c>return</c>, <c>bed</c>
/// ("HH:MM"), <c>homeWeekdayProbability</c>, <c>weekendOutingProbability</c>}, <c>appliances</c>: [{<c>kind</c>:
/// "deferrable", <c>id</c>, <c>maxKw</c>, <c>deferralWeight</c>, <c>unmetEnergyPenalty</c>} | {<c>kind</c>: "thermal",
/// <c>id</c>, <c>tankLitres</c>, <c>heaterKw</c>, <c>setpointC</c>, <c>lowerComfortC</c>, <c>inletC</c>, <c>ambientC</c>,
/// <c>lossKwPerK</c>, <c>shortfallWeight</c>} | {<c>kind</c>: "curtailable", <c>id</c>, <c>use</c> ("space-conditioning"
/// or "pool-pump"), <c>ratedKw</c>, <c>minFraction</c>, <c>shortfallWeight</c>}]}. Unknown fields are errors.
/// JsonDocument and Utf8JsonWriter only (trimming and AOT safe).
/// </summary>
public static class ScenarioFile
{
    /// <summary>The value of the top-level <c>format</c> field.</summary>
    public const string FormatName = "fedgrid-scenario";

    /// <summary>The format version read and written.</summary>
    public const int CurrentVersion = 1;

    /// <summary>Feeder reference of the embedded feeder of the default scenario.</summary>
    public const string BuiltInDemoFeeder = "builtin:" + DefaultScenario.FeederName;

    /// <summary>Reads a scenario file. <paramref name="loadFeederFile"/> reads a feeder file path (needed unless the feeder is built in).</summary>
    /// <exception cref="ScenarioFileException">Unreadable file, malformed JSON or unusable content; each problem has file and JSON path.</exception>
    /// <exception cref="FeederValidationException">The feeder file is unusable (from <paramref name="loadFeederFile"/>).</exception>
    /// <exception cref="MeterDataException">The meter-data file is unusable.</exception>
    public static Scenario Load(string path, Func<string, Feeder>? loadFeederFile = null)
    {
        string text;
        try
        {
            text = File.ReadAllText(path, Encoding.UTF8);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException or ArgumentException or NotSupportedException)
        {
            throw new ScenarioFileException([new ScenarioProblem(path, e is FileNotFoundException or DirectoryNotFoundException ? "file not found" : e.Message)]);
        }
        return Parse(text, path, Path.GetDirectoryName(Path.GetFullPath(path)), loadFeederFile);
    }

    /// <summary>Parses scenario-file text; relative paths are taken from <paramref name="baseDirectory"/> (default: current directory).</summary>
    public static Scenario Parse(string text, string? fileName = null, string? baseDirectory = null, Func<string, Feeder>? loadFeederFile = null)
    {
        ArgumentNullException.ThrowIfNull(text);
        string prefix = fileName is null ? "" : fileName + ": ";
        JsonDocument doc;
        try
        {
            doc = JsonDocument.Parse(text);
        }
        catch (JsonException e)
        {
            throw new ScenarioFileException([new ScenarioProblem($"{prefix}line {(e.LineNumber ?? 0) + 1}", "malformed JSON: " + e.Message.Split(" LineNumber:")[0])]);
        }
        using (doc)
            return new Reader(prefix, baseDirectory ?? Directory.GetCurrentDirectory(), loadFeederFile).Read(doc.RootElement);
    }

    /// <summary>
    /// Writes the parameters of a synthetic scenario (households, tariff, fixed loads, seed, days). Traces are not written:
    /// loading draws them again from the seed, so a scenario built by <see cref="DefaultScenario.Create"/> or from
    /// <see cref="SyntheticData"/> with the same seed round-trips exactly.
    /// </summary>
    /// <param name="scenario">The scenario.</param>
    /// <param name="feederReference"><see cref="BuiltInDemoFeeder"/> or a feeder-file path relative to where the file will be.</param>
    /// <param name="stream">Output (UTF-8).</param>
    public static void Write(Scenario scenario, string feederReference, Stream stream)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        ArgumentNullException.ThrowIfNull(feederReference);
        ArgumentNullException.ThrowIfNull(stream);
        using var w = new Utf8JsonWriter(stream, new JsonWriterOptions { Indented = true });
        w.WriteStartObject();
        w.WriteString("format", FormatName);
        w.WriteNumber("version", CurrentVersion);
        w.WriteString("name", scenario.Name);
        w.WriteNumber("seed", scenario.Seed);
        w.WriteNumber("days", scenario.SlotCount / SlotCalendar.SlotsPerDay);
        w.WriteString("firstDay", scenario.Calendar.FirstDay.ToString());
        w.WriteString("feeder", feederReference);
        w.WriteStartArray("fixedLoads");
        foreach (FixedBusLoad f in scenario.FixedLoads)
        {
            w.WriteStartObject();
            w.WriteString("bus", f.BusId);
            w.WriteNumber("kw", f.Kw);
            w.WriteNumber("kvar", f.Kvar);
            w.WriteEndObject();
        }
        w.WriteEndArray();
        w.WriteStartObject("tariff");
        switch (scenario.Tariff)
        {
            case TimeOfUseTariff t:
                w.WriteString("kind", "time-of-use");
                w.WriteString("name", t.Name);
                w.WriteString("defaultPeriod", t.DefaultPeriodName);
                w.WriteNumber("defaultPrice", t.DefaultPricePerKwh);
                foreach (var (key, periods) in (ReadOnlySpan<(string, ImmutableArray<TouPeriod>)>)[("weekday", t.Weekday), ("weekend", t.Weekend)])
                {
                    w.WriteStartArray(key);
                    foreach (TouPeriod p in periods)
                    {
                        w.WriteStartObject();
                        w.WriteString("name", p.Name);
                        w.WriteString("start", SlotCalendar.FormatClock(p.StartSlot));
                        w.WriteString("end", SlotCalendar.FormatClock(p.EndSlot));
                        w.WriteNumber("price", p.PricePerKwh);
                        w.WriteEndObject();
                    }
                    w.WriteEndArray();
                }
                break;
            case RealTimeTariff r:
                w.WriteString("kind", "real-time");
                w.WriteString("name", r.Name);
                w.WriteNumber("seed", r.Seed);
                RealTimePriceModel m = r.Model;
                w.WriteNumber("basePrice", m.BasePerKwh);
                w.WriteNumber("morningHump", m.MorningHumpPerKwh);
                w.WriteNumber("eveningHump", m.EveningHumpPerKwh);
                w.WriteNumber("reversion", m.Reversion);
                w.WriteNumber("volatility", m.Volatility);
                w.WriteNumber("spikeProbability", m.SpikeProbability);
                w.WriteNumber("spikeMean", m.SpikeMeanPerKwh);
                w.WriteNumber("spikeDecay", m.SpikeDecay);
                w.WriteNumber("floor", m.FloorPerKwh);
                break;
            default:
                throw new ArgumentException($"tariff '{scenario.Tariff.Name}' of type {scenario.Tariff.GetType().Name} has no scenario-file form");
        }
        w.WriteEndObject();
        w.WriteStartArray("households");
        foreach (Household h in scenario.Households)
        {
            w.WriteStartObject();
            w.WriteString("id", h.Id);
            w.WriteString("bus", h.BusId);
            w.WriteNumber("powerFactor", h.PowerFactor);
            w.WriteStartObject("baseLoad");
            w.WriteNumber("standbyKw", h.BaseLoad.StandbyKw);
            w.WriteNumber("morningKw", h.BaseLoad.MorningKw);
            w.WriteNumber("daytimeKw", h.BaseLoad.DaytimeKw);
            w.WriteNumber("eveningKw", h.BaseLoad.EveningKw);
            w.WriteNumber("noise", h.BaseLoad.Noise);
            w.WriteEndObject();
            w.WriteStartObject("occupancy");
            w.WriteString("wake", SlotCalendar.FormatClock(h.Occupancy.WakeSlot));
            w.WriteString("leave", SlotCalendar.FormatClock(h.Occupancy.LeaveSlot));
            w.WriteString("return", SlotCalendar.FormatClock(h.Occupancy.ReturnSlot));
            w.WriteString("bed", SlotCalendar.FormatClock(h.Occupancy.BedSlot));
            w.WriteNumber("homeWeekdayProbability", h.Occupancy.HomeWeekdayProbability);
            w.WriteNumber("weekendOutingProbability", h.Occupancy.WeekendOutingProbability);
            w.WriteEndObject();
            w.WriteStartArray("appliances");
            foreach (Appliance a in h.Appliances)
            {
                w.WriteStartObject();
                w.WriteString("kind", a.Kind);
                w.WriteString("id", a.Id);
                switch (a)
                {
                    case DeferrableLoad d:
                        w.WriteNumber("maxKw", d.MaxKw);
                        w.WriteNumber("deferralWeight", d.DeferralWeight);
                        w.WriteNumber("unmetEnergyPenalty", d.UnmetEnergyPenalty);
                        break;
                    case ThermalStorage t:
                        w.WriteNumber("tankLitres", t.TankLitres);
                        w.WriteNumber("heaterKw", t.HeaterKw);
                        w.WriteNumber("setpointC", t.SetpointC);
                        w.WriteNumber("lowerComfortC", t.LowerComfortC);
                        w.WriteNumber("inletC", t.InletC);
                        w.WriteNumber("ambientC", t.AmbientC);
                        w.WriteNumber("lossKwPerK", t.LossKwPerK);
                        w.WriteNumber("shortfallWeight", t.ShortfallWeight);
                        break;
                    case CurtailableLoad c:
                        w.WriteString("use", c.Use == CurtailableUse.PoolPump ? "pool-pump" : "space-conditioning");
                        w.WriteNumber("ratedKw", c.RatedKw);
                        w.WriteNumber("minFraction", c.MinFraction);
                        w.WriteNumber("shortfallWeight", c.ShortfallWeight);
                        break;
                }
                w.WriteEndObject();
            }
            w.WriteEndArray();
            w.WriteEndObject();
        }
        w.WriteEndArray();
        w.WriteEndObject();
    }

    private sealed class Reader(string prefix, string baseDirectory, Func<string, Feeder>? loadFeederFile)
    {
        private readonly List<ScenarioProblem> _problems = [];

        private void Bad(string path, string message) => _problems.Add(new ScenarioProblem(prefix + path, message));

        public Scenario Read(JsonElement root)
        {
            if (root.ValueKind != JsonValueKind.Object) Throw("$", "expected a JSON object");
            Fields(root, "$", ["format", "version", "name", "seed", "days", "firstDay", "feeder", "fixedLoads", "tariff", "households", "meterData"]);
            if (Str(root, "$", "format") is { } f && f != FormatName) Bad("$.format", $"expected \"{FormatName}\", got \"{f}\"");
            double version = Num(root, "$", "version");
            if (_problems.Count == 0 && version != CurrentVersion) Bad("$.version", $"this build reads version {CurrentVersion}, got {version}");
            string name = Str(root, "$", "name") ?? "scenario";
            ulong seed = 0;
            if (Get(root, "$", "seed", JsonValueKind.Number) is { } se && !se.TryGetUInt64(out seed)) Bad("$.seed", "must be a whole number ≥ 0");
            double daysNum = Num(root, "$", "days");
            int days = (int)daysNum;
            if (!(daysNum >= 1 && daysNum <= 366 && daysNum == days)) { Bad("$.days", $"must be a whole number of days from 1 to 366, got {daysNum}"); days = 1; }
            var firstDay = DayOfWeek.Monday;
            if (Str(root, "$", "firstDay") is { } fd && !Enum.TryParse(fd, ignoreCase: false, out firstDay))
                Bad("$.firstDay", $"'{fd}' is not a day name (Monday … Sunday)");
            var calendar = new SlotCalendar(firstDay);

            var households = ImmutableArray.CreateBuilder<Household>();
            if (Get(root, "$", "households", JsonValueKind.Array) is { } hs)
            {
                int i = 0;
                foreach (JsonElement h in hs.EnumerateArray())
                    if (ReadHousehold(h, $"$.households[{i++}]") is { } hh) households.Add(hh);
            }
            var fixedLoads = ImmutableArray.CreateBuilder<FixedBusLoad>();
            if (root.TryGetProperty("fixedLoads", out JsonElement fl))
            {
                if (fl.ValueKind != JsonValueKind.Array) Bad("$.fixedLoads", "expected an array");
                else
                {
                    int i = 0;
                    foreach (JsonElement e in fl.EnumerateArray())
                    {
                        string p = $"$.fixedLoads[{i++}]";
                        if (e.ValueKind != JsonValueKind.Object) { Bad(p, "expected an object"); continue; }
                        Fields(e, p, ["bus", "kw", "kvar"]);
                        fixedLoads.Add(new FixedBusLoad(Str(e, p, "bus") ?? "", Num(e, p, "kw"), Num(e, p, "kvar")));
                    }
                }
            }
            ITariff? tariff = Get(root, "$", "tariff", JsonValueKind.Object) is { } t ? ReadTariff(t, "$.tariff", calendar, days) : null;
            Feeder? feeder = null;
            if (Str(root, "$", "feeder") is { } feederRef)
            {
                if (feederRef.StartsWith("builtin:", StringComparison.Ordinal))
                {
                    if (feederRef == BuiltInDemoFeeder) feeder = DefaultScenario.CreateFeeder();
                    else Bad("$.feeder", $"unknown built-in feeder '{feederRef}' (built in: {BuiltInDemoFeeder})");
                }
                else if (loadFeederFile is null) Bad("$.feeder", "this reader was given no feeder-file loader; use a built-in feeder or load through the fedgrid command");
                else feeder = loadFeederFile(Path.Combine(baseDirectory, feederRef));
            }
            string? meter = root.TryGetProperty("meterData", out _) ? Str(root, "$", "meterData") : null;
            if (_problems.Count > 0 || feeder is null || tariff is null) throw new ScenarioFileException(_problems.Count > 0 ? _problems : [new ScenarioProblem(prefix + "$", "incomplete scenario")]);

            var hsArr = households.ToImmutable();
            Scenario scenario = new(name, feeder, hsArr, SyntheticData.Generate(hsArr, days, calendar, seed), tariff, calendar, fixedLoads.ToImmutable(), seed);
            if (meter is not null)
            {
                MeterData data = MeterDataCsv.Load(Path.Combine(baseDirectory, meter));
                if (data.FirstDay is { } day && day != firstDay) Throw("$.meterData", $"the meter data start on a {day}, the scenario on a {firstDay}");
                try { scenario = data.ApplyTo(scenario); }
                catch (ArgumentException e) { Throw("$.meterData", e.Message); }
            }
            try { scenario.Validate(); }
            catch (ArgumentException e) { Throw("$.households", e.Message); }
            return scenario;
        }

        private Household? ReadHousehold(JsonElement h, string p)
        {
            if (h.ValueKind != JsonValueKind.Object) { Bad(p, "expected an object"); return null; }
            Fields(h, p, ["id", "bus", "powerFactor", "baseLoad", "occupancy", "appliances"]);
            string id = Str(h, p, "id") ?? "";
            string bus = Str(h, p, "bus") ?? "";
            double pf = Num(h, p, "powerFactor");
            if (!(pf > 0 && pf <= 1)) Bad(p + ".powerFactor", $"must be in (0, 1], got {pf}");
            BaseLoadProfile? bl = null;
            if (Get(h, p, "baseLoad", JsonValueKind.Object) is { } b)
            {
                string q = p + ".baseLoad";
                Fields(b, q, ["standbyKw", "morningKw", "daytimeKw", "eveningKw", "noise"]);
                bl = new BaseLoadProfile(NonNeg(b, q, "standbyKw"), NonNeg(b, q, "morningKw"), NonNeg(b, q, "daytimeKw"), NonNeg(b, q, "eveningKw"), NonNeg(b, q, "noise"));
            }
            OccupancySchedule? occ = null;
            if (Get(h, p, "occupancy", JsonValueKind.Object) is { } o)
            {
                string q = p + ".occupancy";
                Fields(o, q, ["wake", "leave", "return", "bed", "homeWeekdayProbability", "weekendOutingProbability"]);
                occ = new OccupancySchedule(Clock(o, q, "wake"), Clock(o, q, "leave"), Clock(o, q, "return"), Clock(o, q, "bed"),
                    Prob(o, q, "homeWeekdayProbability"), Prob(o, q, "weekendOutingProbability"));
                if (_problems.Count == 0 && !(occ.WakeSlot < occ.LeaveSlot && occ.LeaveSlot < occ.ReturnSlot && occ.ReturnSlot < occ.BedSlot))
                    Bad(q, "need wake < leave < return < bed");
            }
            var apps = ImmutableArray.CreateBuilder<Appliance>();
            if (Get(h, p, "appliances", JsonValueKind.Array) is { } arr)
            {
                int k = 0;
                foreach (JsonElement a in arr.EnumerateArray())
                {
                    string q = $"{p}.appliances[{k++}]";
                    if (a.ValueKind != JsonValueKind.Object) { Bad(q, "expected an object"); continue; }
                    string aid = Str(a, q, "id") ?? "";
                    switch (Str(a, q, "kind"))
                    {
                        case "deferrable":
                            Fields(a, q, ["kind", "id", "maxKw", "deferralWeight", "unmetEnergyPenalty"]);
                            apps.Add(new DeferrableLoad(aid, Pos(a, q, "maxKw"), NonNeg(a, q, "deferralWeight"), NonNeg(a, q, "unmetEnergyPenalty")));
                            break;
                        case "thermal":
                            Fields(a, q, ["kind", "id", "tankLitres", "heaterKw", "setpointC", "lowerComfortC", "inletC", "ambientC", "lossKwPerK", "shortfallWeight"]);
                            apps.Add(new ThermalStorage(aid, Pos(a, q, "tankLitres"), Pos(a, q, "heaterKw"), Num(a, q, "setpointC"), Num(a, q, "lowerComfortC"),
                                Num(a, q, "inletC"), Num(a, q, "ambientC"), NonNeg(a, q, "lossKwPerK"), NonNeg(a, q, "shortfallWeight")));
                            break;
                        case "curtailable":
                            Fields(a, q, ["kind", "id", "use", "ratedKw", "minFraction", "shortfallWeight"]);
                            CurtailableUse use = CurtailableUse.SpaceConditioning;
                            switch (Str(a, q, "use"))
                            {
                                case "pool-pump": use = CurtailableUse.PoolPump; break;
                                case "space-conditioning" or null: break;
                                case var u: Bad(q + ".use", $"'{u}' is not 'space-conditioning' or 'pool-pump'"); break;
                            }
                            apps.Add(new CurtailableLoad(aid, NonNeg(a, q, "ratedKw"), Prob(a, q, "minFraction"), NonNeg(a, q, "shortfallWeight"), use));
                            break;
                        case null: break;
                        case var other:
                            Bad(q + ".kind", $"'{other}' is not 'deferrable', 'thermal' or 'curtailable'");
                            break;
                    }
                }
            }
            return bl is null || occ is null ? null : new Household(id, bus, bl, pf, apps.ToImmutable(), occ);
        }

        private ITariff? ReadTariff(JsonElement t, string p, SlotCalendar calendar, int days)
        {
            string name = Str(t, p, "name") ?? "tariff";
            switch (Str(t, p, "kind"))
            {
                case "time-of-use":
                {
                    Fields(t, p, ["kind", "name", "defaultPeriod", "defaultPrice", "weekday", "weekend"]);
                    string def = Str(t, p, "defaultPeriod") ?? "";
                    double price = NonNeg(t, p, "defaultPrice");
                    var wd = Periods(t, p, "weekday");
                    var we = Periods(t, p, "weekend");
                    if (_problems.Count > 0) return null;
                    try { return new TimeOfUseTariff(name, calendar, def, price, wd, we); }
                    catch (ArgumentException e) { Bad(p, e.Message); return null; }
                }
                case "real-time":
                {
                    Fields(t, p, ["kind", "name", "seed", "basePrice", "morningHump", "eveningHump", "reversion", "volatility", "spikeProbability", "spikeMean", "spikeDecay", "floor"]);
                    ulong seed = 0;
                    if (Get(t, p, "seed", JsonValueKind.Number) is { } s && !s.TryGetUInt64(out seed)) Bad(p + ".seed", "must be a whole number ≥ 0");
                    var model = new RealTimePriceModel(NonNeg(t, p, "basePrice"), NonNeg(t, p, "morningHump"), NonNeg(t, p, "eveningHump"),
                        Num(t, p, "reversion"), NonNeg(t, p, "volatility"), Prob(t, p, "spikeProbability"), NonNeg(t, p, "spikeMean"),
                        Num(t, p, "spikeDecay"), NonNeg(t, p, "floor"));
                    if (_problems.Count > 0) return null;
                    try { return RealTimeTariff.Generate(name, model, days * SlotCalendar.SlotsPerDay, seed); }
                    catch (ArgumentException e) { Bad(p, e.Message); return null; }
                }
                case null: return null;
                case var other:
                    Bad(p + ".kind", $"'{other}' is not 'time-of-use' or 'real-time'");
                    return null;
            }
        }

        private ImmutableArray<TouPeriod> Periods(JsonElement t, string p, string key)
        {
            var list = ImmutableArray.CreateBuilder<TouPeriod>();
            if (Get(t, p, key, JsonValueKind.Array) is not { } arr) return list.ToImmutable();
            int i = 0;
            foreach (JsonElement e in arr.EnumerateArray())
            {
                string q = $"{p}.{key}[{i++}]";
                if (e.ValueKind != JsonValueKind.Object) { Bad(q, "expected an object"); continue; }
                Fields(e, q, ["name", "start", "end", "price"]);
                list.Add(new TouPeriod(Str(e, q, "name") ?? "", Clock(e, q, "start"), Clock(e, q, "end"), NonNeg(e, q, "price")));
            }
            return list.ToImmutable();
        }

        private void Fields(JsonElement e, string p, string[] known)
        {
            foreach (JsonProperty prop in e.EnumerateObject())
                if (Array.IndexOf(known, prop.Name) < 0) Bad($"{p}.{prop.Name}", $"unknown field (known here: {string.Join(", ", known)})");
        }

        private JsonElement? Get(JsonElement e, string p, string name, JsonValueKind kind)
        {
            if (!e.TryGetProperty(name, out JsonElement v)) { Bad($"{p}.{name}", "required field is missing"); return null; }
            if (v.ValueKind != kind) { Bad($"{p}.{name}", $"expected {Describe(kind)}, got {Describe(v.ValueKind)}"); return null; }
            return v;
        }

        private static string Describe(JsonValueKind k) => k switch
        {
            JsonValueKind.Number => "a number", JsonValueKind.String => "a string", JsonValueKind.Array => "an array",
            JsonValueKind.Object => "an object", _ => k.ToString().ToLowerInvariant(),
        };

        private string? Str(JsonElement e, string p, string name) => Get(e, p, name, JsonValueKind.String)?.GetString();

        private double Num(JsonElement e, string p, string name)
        {
            if (Get(e, p, name, JsonValueKind.Number) is not { } v) return 0;
            double d = v.GetDouble();
            if (!double.IsFinite(d)) { Bad($"{p}.{name}", "must be finite"); return 0; }
            return d;
        }

        private double NonNeg(JsonElement e, string p, string name)
        {
            double d = Num(e, p, name);
            if (d < 0) Bad($"{p}.{name}", $"must be ≥ 0, got {d.ToString(CultureInfo.InvariantCulture)}");
            return d;
        }

        private double Pos(JsonElement e, string p, string name)
        {
            double d = Num(e, p, name);
            if (!(d > 0) && e.TryGetProperty(name, out JsonElement v) && v.ValueKind == JsonValueKind.Number)
                Bad($"{p}.{name}", $"must be > 0, got {d.ToString(CultureInfo.InvariantCulture)}");
            return d;
        }

        private double Prob(JsonElement e, string p, string name)
        {
            double d = Num(e, p, name);
            if (d is < 0 or > 1) Bad($"{p}.{name}", $"must be in [0, 1], got {d.ToString(CultureInfo.InvariantCulture)}");
            return d;
        }

        private int Clock(JsonElement e, string p, string name)
        {
            if (Str(e, p, name) is not { } s) return 0;
            try { return SlotCalendar.ParseClock(s); }
            catch (FormatException x) { Bad($"{p}.{name}", x.Message); return 0; }
        }

        private void Throw(string path, string message)
        {
            Bad(path, message);
            throw new ScenarioFileException(_problems);
        }
    }
}
