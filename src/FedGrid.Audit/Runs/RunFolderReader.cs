using System.Globalization;
using FedGrid.Audit.Scoring;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Training;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Audit.Runs;

/// <summary>Thrown when a run folder cannot be audited; the message names the file and what is wrong.</summary>
public sealed class RunFolderException : Exception
{
    /// <summary>Creates the exception.</summary>
    /// <param name="message">What is wrong.</param>
    public RunFolderException(string message) : base(message)
    {
    }
}

/// <summary>A run folder read for auditing.</summary>
/// <param name="View">What the coordinator holds (from the transcript) plus the declared side information.</param>
/// <param name="Context">Run description for the outputs.</param>
/// <param name="Truth">The simulation-only ground truth, or null when the folder has none (a real deployment).</param>
/// <param name="TranscriptNote">Torn-tail or incompleteness note, or null.</param>
public sealed record AuditRun(AttackerView View, AuditContext Context, GroundTruth? Truth, string? TranscriptNote);

/// <summary>
/// Builds an <see cref="AttackerView"/> from a run folder: the coordinator's transcript (<c>transcript.fgt</c>), and side
/// information. The partial sums, broadcast and uploaded parameters, projection inputs and returned setpoints come from the
/// transcript only. Side information: public priors from a reference population (the default scenario's generator with a
/// reference seed of its own, not the run's households); the operator's bus meters and, when declared, the substation meter,
/// simulated from the run's simulation record (household consumption = base load + applied setpoint, summed per bus and over
/// the feeder; fixed loads and losses are left out — the meter attack fits a constant and a quadratic term for them).
/// The simulation record is also the ground truth, handed only to the scorer.
/// </summary>
public static class RunFolderReader
{
    /// <summary>Transcript file name in a run folder.</summary>
    public const string TranscriptName = "transcript" + TranscriptFormat.Extension;

    /// <summary>Seed of the public reference population the priors are drawn from.</summary>
    public const ulong ReferenceSeed = 0x5EED_0FF1_CE00_0001UL;

    /// <summary>Households in the reference population (several default-scenario draws).</summary>
    public const int ReferenceDraws = 3;

    /// <summary>Reads a run folder.</summary>
    /// <param name="directory">The folder.</param>
    /// <param name="priors">Whether the attacker may use the public priors (they are always computed: the scorer's prior-only guess uses them).</param>
    /// <param name="substationMeter">Whether the substation meter is declared side information.</param>
    /// <returns>The run.</returns>
    /// <exception cref="RunFolderException">Missing or unreadable files.</exception>
    public static AuditRun Load(string directory, bool priors = true, bool substationMeter = false)
    {
        ArgumentNullException.ThrowIfNull(directory);
        if (!Directory.Exists(directory)) throw new RunFolderException($"{directory}: no such run folder");
        string transcript = Path.Combine(directory, TranscriptName);
        if (!File.Exists(transcript))
        {
            string[] any = Directory.GetFiles(directory, "*" + TranscriptFormat.Extension);
            if (any.Length != 1) throw new RunFolderException($"{directory}: no {TranscriptName} (a run folder written by 'fedgrid train --mode federated')");
            transcript = any[0];
        }
        TranscriptData data = ReadTranscript(transcript);
        string truthPath = Path.Combine(directory, GroundTruthWriter.FileName);
        TruthData? truth = File.Exists(truthPath) ? ReadTruth(truthPath, data) : null;
        int T = data.Steps;
        int days = (T + SlotCalendar.SlotsPerDay - 1) / SlotCalendar.SlotsPerDay;
        Reference reference = BuildReference(days, T);

        var features = HouseholdControlTask.FeatureNames;
        int n = data.Features;
        var inputFeatures = new InputFeature[n];
        for (int j = 0; j < n; j++)
        {
            string name = j < features.Count ? features[j] : $"feature{j}";
            inputFeatures[j] = j switch
            {
                0 => new InputFeature(name, Quantity.BaseLoad, HouseholdControlTask.KwScale),
                1 => new InputFeature(name, Quantity.FlexMinimum, HouseholdControlTask.KwScale),
                2 => new InputFeature(name, Quantity.FlexDesired, HouseholdControlTask.KwScale),
                3 or 4 or 5 or 6 => new InputFeature(name, null, IsPublic: true),
                _ => new InputFeature(name, null),
            };
        }
        var calendar = new SlotCalendar(DayOfWeek.Monday);
        var pub = new double[T * n];
        Array.Fill(pub, double.NaN);
        for (int t = 0; t < T && n > 6; t++)
        {
            double angle = 2 * Math.PI * SlotCalendar.SlotOfDay(t) / SlotCalendar.SlotsPerDay;
            pub[t * n + 4] = (float)Math.Sin(angle);
            pub[t * n + 5] = (float)Math.Cos(angle);
            pub[t * n + 6] = calendar.IsWeekend(t) ? 1 : 0; // the default scenario's calendar starts on a Monday
        }

        var busIds = data.Buses.Distinct().OrderBy(b => b, StringComparer.Ordinal).ToList();
        var households = new List<HouseholdView>();
        for (int m = 0; m < data.Households; m++)
        {
            var reported = new Dictionary<Quantity, double[]>();
            if (data.ReportedBase[m] is { } rb)
            {
                reported[Quantity.BaseLoad] = rb;
                reported[Quantity.FlexMinimum] = data.ReportedMin[m]!;
                reported[Quantity.FlexDesired] = data.ReportedMax[m]!;
            }
            households.Add(new HouseholdView
            {
                Id = data.Ids[m], Bus = busIds.IndexOf(data.Buses[m]), PartialSums = data.Sums[m], Rounds = data.Rounds[m], ReportedKw = reported,
                SetpointKw = data.Setpoints[m], Priors = reference.Priors, PriorTotalKw = reference.TotalKw,
            });
        }
        double[]? busMeter = null, substation = null;
        if (truth is not null)
        {
            busMeter = new double[busIds.Count * T];
            substation = new double[T];
            for (int m = 0; m < data.Households; m++)
            {
                int b = busIds.IndexOf(data.Buses[m]);
                for (int t = 0; t < T; t++)
                {
                    double kw = truth.Base[m][t] + truth.Setpoint[m][t];
                    busMeter[b * T + t] += kw;
                    substation[t] += kw;
                }
            }
        }
        var busTotals = new Dictionary<Quantity, double[]>();
        if (data.BusTotals.Count > 0)
        {
            // Share layout of BusAggregateProjectionInputs: proposal, flexible minimum, desired, base kW, base kvar.
            foreach (var (q, index) in new[] { (Quantity.BaseLoad, 3), (Quantity.FlexMinimum, 1), (Quantity.FlexDesired, 2) })
            {
                var series = new double[busIds.Count * T];
                Array.Fill(series, double.NaN);
                for (int b = 0; b < busIds.Count; b++)
                    if (data.BusTotals.TryGetValue(busIds[b], out double[][]? totals))
                        Array.Copy(totals[index], 0, series, b * T, T);
                busTotals[q] = series;
            }
        }
        var view = new AttackerView
        {
            BusTotalsKw = busTotals,
            SlotCount = T, FirstLayerSize = data.H, Features = inputFeatures, PublicFeatureValues = pub, BusIds = busIds, Households = households,
            BusMeterKw = busMeter, SubstationMeterKw = substationMeter ? substation : null,
            OccupancyThresholdKw = reference.Thresholds, PriorHomeProbability = reference.HomeProbability,
        };
        var side = new List<string>();
        if (priors) side.Add("priors");
        if (substationMeter && substation is not null) side.Add("substation-meter");
        if (busMeter is not null) side.Add("bus-meters (physical floor)");
        var context = new AuditContext(Path.GetFileName(Path.GetFullPath(directory).TrimEnd(Path.DirectorySeparatorChar)), data.Scheme, data.ProjectionForm, side);
        GroundTruth? gt = truth is null ? null : GroundTruth.FromSeries(data.Ids,
            new Dictionary<Quantity, double[][]> { [Quantity.BaseLoad] = truth.Base, [Quantity.FlexMinimum] = truth.Min, [Quantity.FlexDesired] = truth.Desired }, truth.Occupied);
        return new AuditRun(view, context, gt, data.Note);
    }

    private sealed class TranscriptData
    {
        public string Scheme = "", ProjectionForm = "";
        public int Households, Features, H, HCritic, StepsPerRound, Steps;
        public string[] Ids = [], Buses = [];
        public float[][] Sums = [];
        public double[]?[] ReportedBase = [], ReportedMin = [], ReportedMax = [];
        public double[]?[] Setpoints = [];
        // Bus-aggregate form: bus totals by quantity, keyed by bus id (one value per step; NaN where the bus's shares were incomplete).
        public Dictionary<string, double[][]> BusTotals = new(StringComparer.Ordinal);
        public List<RoundObservation>[] Rounds = [];
        public string? Note;
    }

    private static TranscriptData ReadTranscript(string path)
    {
        TranscriptReader reader;
        try { reader = TranscriptReader.Open(path); }
        catch (TranscriptFormatException e) { throw new RunFolderException(e.Message); }
        using (reader)
        {
            TranscriptHeader h = reader.Header;
            int M = h.HouseholdCount;
            if (M <= 0 || h.ActorShape is null || h.ActorShape.InputBlocks.Count != M || h.ActorShape.HiddenSizes.Count == 0)
                throw new RunFolderException($"{path}: header: actor shape does not match {M} households");
            int n = h.ActorShape.InputBlocks[0];
            int ha = h.ActorShape.HiddenSizes[0];
            int hc = h.CriticShape?.HiddenSizes.Count > 0 ? h.CriticShape.HiddenSizes[0] : 0;
            var d = new TranscriptData
            {
                Scheme = h.Scheme, ProjectionForm = h.ProjectionInputs, Households = M, Features = n, H = ha, HCritic = hc, StepsPerRound = Math.Max(1, h.StepsPerRound),
                Ids = new string[M], Buses = new string[M],
            };
            var pendingJoins = new Queue<JoinRequest>();
            var sums = new List<float[]>[M];
            var baseKw = new List<double>[M];
            var minKw = new List<double>[M];
            var maxKw = new List<double>[M];
            var setKw = new List<double>[M];
            for (int m = 0; m < M; m++) { sums[m] = []; baseKw[m] = []; minKw[m] = []; maxKw[m] = []; setKw[m] = []; }
            // Per household: the actor and critic first-layer columns in force, and the round's broadcast first-layer biases.
            var wa = new double[M][];
            var wc = new double[M][];
            double[]? biasA = null, biasC = null;
            var roundWeights = new Dictionary<(int M, int R), double[]?>();
            var roundBias = new Dictionary<int, (double[] A, double[] C)>();
            var uploads = new Dictionary<(int M, int R), (FirstLayerUpdate[] U, int Samples)>();
            var maskedUploads = new HashSet<(int M, int R)>();
            long maxStep = -1;
            // Bus-aggregate shares: per bus, per step, the running sum mod 2^64 and the number of shares in it.
            var busMembers = new Dictionary<string, int>(StringComparer.Ordinal);
            var busBits = new Dictionary<string, int>(StringComparer.Ordinal);
            var busSums = new Dictionary<string, List<(ulong[] Sum, int Count)>>(StringComparer.Ordinal);
            foreach (TranscriptRecord r in reader.Records())
            {
                switch (r.Kind())
                {
                    case RecordKind.Join:
                        pendingJoins.Enqueue(r.Received.Join);
                        break;
                    case RecordKind.Accepted:
                        if (pendingJoins.Count > 0)
                        {
                            JoinRequest j = pendingJoins.Dequeue();
                            int m = r.Sent.Accepted.HouseholdIndex;
                            if (m >= 0 && m < M) { d.Ids[m] = j.HouseholdId; d.Buses[m] = j.BusId; }
                        }
                        break;
                    case RecordKind.Model:
                    {
                        ModelBroadcast mb = r.Sent.Model;
                        bool own = mb.Scope == ParameterScope.OwnColumnsAndShared;
                        int ownA = own ? ha * n : 0, ownC = own ? hc * n : 0;
                        if (own && r.Sent.HouseholdIndex is int hm && hm >= 0 && hm < M)
                        {
                            wa[hm] = ToDouble(mb.ActorParameters, 0, ha * n);
                            wc[hm] = ToDouble(mb.CriticParameters, 0, hc * n);
                        }
                        biasA = ToDouble(mb.ActorParameters, ownA, ha);
                        biasC = ToDouble(mb.CriticParameters, ownC, hc);
                        roundBias[mb.Round] = (biasA, biasC);
                        break;
                    }
                    case RecordKind.PartialSums:
                    {
                        int m = r.Received.HouseholdIndex;
                        PartialSums ps = r.Received.PartialSums;
                        if (m < 0 || m >= M) break;
                        if (ps.Actor.Count != ha)
                        {
                            // Scheme masked-sums: the coordinator holds only masked ring words, no usable partial sums;
                            // the step counts, its row stays unobserved (the attacks fall back to the prior there).
                            if (ps.MaskedActor.Count == ha) maxStep = Math.Max(maxStep, ps.Step);
                            break;
                        }
                        long step = ps.Step;
                        maxStep = Math.Max(maxStep, step);
                        while (sums[m].Count <= step) sums[m].Add(null!);
                        var a = new float[ha];
                        ps.Actor.CopyTo(a, 0);
                        sums[m][(int)step] = a;
                        int round = (int)(step / d.StepsPerRound);
                        if (!roundWeights.ContainsKey((m, round)))
                            roundWeights[(m, round)] = wa[m] is null ? null : (double[])wa[m].Clone();
                        break;
                    }
                    case RecordKind.ProjectionInputs:
                    {
                        int m = r.Received.HouseholdIndex;
                        ProjectionInputs pi = r.Received.ProjectionInputs;
                        if (m < 0 || m >= M) break;
                        Put(baseKw[m], pi.Step, pi.BaseKw);
                        Put(minKw[m], pi.Step, pi.FlexMinKw);
                        Put(maxKw[m], pi.Step, pi.FlexMaxKw);
                        break;
                    }
                    case RecordKind.BusPeers:
                    {
                        BusPeers bp = r.Sent.BusPeers;
                        busMembers[bp.BusId] = bp.Members.Count;
                        busBits[bp.BusId] = bp.FractionalBits;
                        break;
                    }
                    case RecordKind.BusShares:
                    {
                        int m = r.Received.HouseholdIndex;
                        BusShares bs = r.Received.BusShares;
                        if (m < 0 || m >= M || d.Buses[m] is not { } bus || bs.Masked.Count != BusAggregateProjectionInputs.ValuesPerShare || bs.Step < 0) break;
                        if (!busSums.TryGetValue(bus, out var list)) busSums[bus] = list = [];
                        while (list.Count <= bs.Step) list.Add((new ulong[BusAggregateProjectionInputs.ValuesPerShare], 0));
                        var (sum, count) = list[(int)bs.Step];
                        for (int i = 0; i < sum.Length; i++) sum[i] = unchecked(sum[i] + bs.Masked[i]);
                        list[(int)bs.Step] = (sum, count + 1);
                        break;
                    }
                    case RecordKind.Setpoint:
                    {
                        int m = r.Sent.HouseholdIndex;
                        if (m < 0 || m >= M) break;
                        Put(setKw[m], r.Sent.Setpoint.Step, r.Sent.Setpoint.SetpointKw);
                        break;
                    }
                    case RecordKind.Upload:
                    {
                        int m = r.Received.HouseholdIndex;
                        ParameterUpload up = r.Received.Upload;
                        if (m < 0 || m >= M) break;
                        // Masked uploads: ring words whose masks cancel only in the round's sum; nothing individual to read.
                        if (up.MaskedParameters.Count > 0) { maskedUploads.Add((m, up.Round)); break; }
                        if (up.Scope != ParameterScope.OwnColumnsAndShared || wa[m] is null || !roundBias.TryGetValue(up.Round, out var bias)) break;
                        double[] newA = ToDouble(up.ActorParameters, 0, ha * n), newC = ToDouble(up.CriticParameters, 0, hc * n);
                        double[] upBiasA = ToDouble(up.ActorParameters, ha * n, ha), upBiasC = ToDouble(up.CriticParameters, hc * n, hc);
                        // Uploads are float32: each change carries the rounding interval of the uploaded value.
                        var updates = new List<FirstLayerUpdate>
                        {
                            new(ha, Diff(newA, wa[m]), Diff(upBiasA, bias.A)) { WeightRounding = HalfGaps(newA), BiasRounding = HalfGaps(upBiasA) },
                        };
                        if (hc > 0 && wc[m] is not null)
                            updates.Add(new FirstLayerUpdate(hc, Diff(newC, wc[m]), Diff(upBiasC, bias.C)) { WeightRounding = HalfGaps(newC), BiasRounding = HalfGaps(upBiasC) });
                        uploads[(m, up.Round)] = ([.. updates], up.SampleCount);
                        // The household keeps its trained columns: they are W_m of the next round.
                        wa[m] = newA;
                        wc[m] = newC;
                        break;
                    }
                }
            }
            if (reader.Torn is { } torn) d.Note = $"{path}: transcript torn at byte {torn.Offset} ({torn.Reason}); {torn.RecordsBefore} records before it were audited";
            else if (!reader.Completed) d.Note = $"{path}: transcript has no run-completed record (the run may have stopped early)";
            if (maxStep < 0) throw new RunFolderException($"{path}: no partial sums in the transcript");
            for (int m = 0; m < M; m++)
                if (d.Ids[m] is null) throw new RunFolderException($"{path}: household index {m} never joined");
            int T = (int)maxStep + 1;
            d.Steps = T;
            d.Sums = new float[M][];
            d.ReportedBase = new double[M][];
            d.ReportedMin = new double[M][];
            d.ReportedMax = new double[M][];
            d.Setpoints = new double[M][];
            d.Rounds = new List<RoundObservation>[M];
            int rounds = (T + d.StepsPerRound - 1) / d.StepsPerRound;
            for (int m = 0; m < M; m++)
            {
                var s = new float[T * ha];
                Array.Fill(s, float.NaN);
                for (int t = 0; t < Math.Min(T, sums[m].Count); t++)
                    if (sums[m][t] is { } a) a.CopyTo(s, t * ha);
                d.Sums[m] = s;
                d.ReportedBase[m] = baseKw[m].Count > 0 ? Pad(baseKw[m], T) : null;
                d.ReportedMin[m] = minKw[m].Count > 0 ? Pad(minKw[m], T) : null;
                d.ReportedMax[m] = maxKw[m].Count > 0 ? Pad(maxKw[m], T) : null;
                d.Setpoints[m] = setKw[m].Count > 0 ? Pad(setKw[m], T) : null;
                d.Rounds[m] = [];
                for (int r = 0; r < rounds; r++)
                {
                    roundWeights.TryGetValue((m, r), out double[]? w);
                    uploads.TryGetValue((m, r), out var u);
                    d.Rounds[m].Add(new RoundObservation
                    {
                        StartSlot = r * d.StepsPerRound, SlotCount = Math.Min(d.StepsPerRound, T - r * d.StepsPerRound), BroadcastWeights = w,
                        Updates = u.U ?? [], LocalSamples = u.Samples, MaskedUpload = maskedUploads.Contains((m, r)),
                        // The household trains on rows [0, Count − 1) of its buffer, whose row 0 is the previous round's last step:
                        // the samples are the slots just before the round's last one.
                        TrainingStartSlot = u.U is null ? -1 : Math.Max(0, r * d.StepsPerRound + Math.Min(d.StepsPerRound, T - r * d.StepsPerRound) - 1 - u.Samples),
                    });
                }
            }
            // The bus totals the coordinator learns: the sum of a bus's masked shares, where every member's share arrived.
            foreach (var (bus, list) in busSums)
            {
                if (!busMembers.TryGetValue(bus, out int members) || !busBits.TryGetValue(bus, out int bits)) continue;
                double scale = Math.ScaleB(1.0, -bits);
                var totals = new double[BusAggregateProjectionInputs.ValuesPerShare][];
                for (int i = 0; i < totals.Length; i++) { totals[i] = new double[T]; Array.Fill(totals[i], double.NaN); }
                for (int t = 0; t < Math.Min(T, list.Count); t++)
                {
                    if (list[t].Count != members) continue;
                    for (int i = 0; i < totals.Length; i++) totals[i][t] = unchecked((long)list[t].Sum[i]) * scale;
                }
                d.BusTotals[bus] = totals;
            }
            return d;
        }
    }

    private static double[] ToDouble(Google.Protobuf.Collections.RepeatedField<float> v, int offset, int count)
    {
        var r = new double[count];
        for (int i = 0; i < count && offset + i < v.Count; i++) r[i] = v[offset + i];
        return r;
    }

    private static double[] Diff(double[] after, double[] before)
    {
        var r = new double[after.Length];
        for (int i = 0; i < r.Length; i++) r[i] = after[i] - before[i];
        return r;
    }

    private static double[] HalfGaps(double[] float32Values)
    {
        var r = new double[float32Values.Length];
        for (int i = 0; i < r.Length; i++) r[i] = FirstLayerUpdate.HalfGap((float)float32Values[i]);
        return r;
    }

    private static void Put(List<double> list, long step, double value)
    {
        while (list.Count <= step) list.Add(double.NaN);
        list[(int)step] = value;
    }

    private static double[] Pad(List<double> list, int T)
    {
        var r = new double[T];
        Array.Fill(r, double.NaN);
        for (int t = 0; t < Math.Min(T, list.Count); t++) r[t] = list[t];
        return r;
    }

    private sealed record TruthData(double[][] Base, double[][] Min, double[][] Desired, double[][] Setpoint, bool[][] Occupied);

    private static TruthData ReadTruth(string path, TranscriptData d)
    {
        int M = d.Households, T = d.Steps;
        var b = new double[M][]; var mn = new double[M][]; var ds = new double[M][]; var sp = new double[M][]; var oc = new bool[M][];
        for (int m = 0; m < M; m++) { b[m] = new double[T]; mn[m] = new double[T]; ds[m] = new double[T]; sp[m] = new double[T]; oc[m] = new bool[T]; }
        int lineNo = 0;
        bool header = false;
        foreach (string line in File.ReadLines(path))
        {
            lineNo++;
            if (line.Length == 0 || line[0] == '#') continue;
            if (!header)
            {
                if (line != GroundTruthWriter.Header) throw new RunFolderException($"{path}:{lineNo}: header is not '{GroundTruthWriter.Header}'");
                header = true;
                continue;
            }
            string[] f = line.Split(',');
            if (f.Length != 12) throw new RunFolderException($"{path}:{lineNo}: {f.Length} fields, 12 expected");
            try
            {
                long step = long.Parse(f[0], CultureInfo.InvariantCulture);
                int m = int.Parse(f[3], CultureInfo.InvariantCulture);
                if (step >= T) continue; // beyond the audited transcript (torn tail)
                if (m < 0 || m >= M) throw new RunFolderException($"{path}:{lineNo}: field 'index': household {m} is not in the transcript");
                if (d.Ids[m] != f[2]) throw new RunFolderException($"{path}:{lineNo}: field 'household': '{f[2]}' but the transcript's household {m} is '{d.Ids[m]}'");
                b[m][step] = double.Parse(f[5], CultureInfo.InvariantCulture);
                mn[m][step] = double.Parse(f[6], CultureInfo.InvariantCulture);
                ds[m][step] = double.Parse(f[7], CultureInfo.InvariantCulture);
                oc[m][step] = f[8] == "1";
                sp[m][step] = double.Parse(f[10], CultureInfo.InvariantCulture);
            }
            catch (FormatException)
            {
                throw new RunFolderException($"{path}:{lineNo}: a number does not parse");
            }
        }
        if (!header) throw new RunFolderException($"{path}: no header line");
        return new TruthData(b, mn, ds, sp, oc);
    }

    private sealed record Reference(Dictionary<Quantity, QuantityPrior> Priors, double[] TotalKw, double[] Thresholds, double[] HomeProbability);

    // Public priors: population means by day type (weekday/weekend) and slot of day over households of the reference
    // population, stepped with no control (setpoint = desired) to obtain the flexible bounds.
    private static Reference BuildReference(int days, int T)
    {
        const int D = SlotCalendar.SlotsPerDay;
        var sum = new double[3, 2, D];
        var sum2 = new double[3, 2, D];
        var tot = new double[2, D];
        var count = new int[2, D];
        var refBase = new List<double[]>();
        var refOcc = new List<bool[]>();
        for (int draw = 0; draw < ReferenceDraws; draw++)
        {
            Scenario s = DefaultScenario.Create(ReferenceSeed + (ulong)draw, days);
            var env = new DemandResponseEnvironment(s);
            StepResult res = env.CreateResult();
            int M = env.HouseholdCount;
            var set = new double[M];
            var bases = new double[M][];
            for (int m = 0; m < M; m++) bases[m] = new double[s.SlotCount];
            while (!env.Done)
            {
                int t = env.Slot;
                int type = s.Calendar.IsWeekend(t) ? 1 : 0, slot = SlotCalendar.SlotOfDay(t);
                for (int m = 0; m < M; m++)
                {
                    double b = env.BaseKw[m], mn = env.FlexMinKw[m], ds = env.FlexDesiredKw[m];
                    bases[m][t] = b;
                    sum[0, type, slot] += b; sum2[0, type, slot] += b * b;
                    sum[1, type, slot] += mn; sum2[1, type, slot] += mn * mn;
                    sum[2, type, slot] += ds; sum2[2, type, slot] += ds * ds;
                    tot[type, slot] += b + ds;
                    set[m] = ds;
                }
                count[type, slot] += M;
                env.Step(set, res);
            }
            for (int m = 0; m < M; m++)
            {
                refBase.Add(bases[m]);
                refOcc.Add([.. s.Traces[m].Occupied]);
            }
        }
        var calendar = new SlotCalendar(DayOfWeek.Monday);
        var priors = new Dictionary<Quantity, QuantityPrior>();
        Quantity[] qs = [Quantity.BaseLoad, Quantity.FlexMinimum, Quantity.FlexDesired];
        for (int q = 0; q < 3; q++)
        {
            var mean = new double[T];
            double dev = 0, n = 0;
            for (int t = 0; t < T; t++)
            {
                int type = calendar.IsWeekend(t) ? 1 : 0, slot = SlotCalendar.SlotOfDay(t);
                int c = Math.Max(1, count[type, slot]);
                mean[t] = sum[q, type, slot] / c;
            }
            for (int type = 0; type < 2; type++)
                for (int slot = 0; slot < D; slot++)
                {
                    int c = count[type, slot];
                    if (c == 0) continue;
                    double mu = sum[q, type, slot] / c;
                    dev += sum2[q, type, slot] - c * mu * mu;
                    n += c;
                }
            priors[qs[q]] = new QuantityPrior(mean, Math.Sqrt(Math.Max(dev, 0) / Math.Max(n, 1)));
        }
        var total = new double[T];
        for (int t = 0; t < T; t++)
        {
            int type = calendar.IsWeekend(t) ? 1 : 0, slot = SlotCalendar.SlotOfDay(t);
            total[t] = tot[type, slot] / Math.Max(1, count[type, slot]);
        }
        (double[] tau, double[] prob) = OccupancyThresholds.Calibrate(refBase, refOcc, D);
        return new Reference(priors, total, tau, prob);
    }
}
