using FedGrid.Audit.Scoring;

namespace FedGrid.Audit.Tests;

/// <summary>How a synthetic run is observed.</summary>
internal sealed record SyntheticOptions
{
    public int Households { get; init; } = 6;
    public int Days { get; init; } = 2;
    public int Neurons { get; init; } = 8;
    public bool PlainWeights { get; init; } = true;
    public bool Float32 { get; init; }
    public bool PartialSumsAreNoise { get; init; }
    public int SlotsPerRound { get; init; } = 96;
    /// <summary>0: no uploads; 1: one local sample per round (the round's first slot); >1: every slot of the round.</summary>
    public int UploadSamples { get; init; }
    public bool UploadsAreNoise { get; init; }
    public bool HouseholdProjectionInputs { get; init; }
    public bool BusAggregateInputs { get; init; }
    public int HouseholdsPerBus { get; init; } = 2;
    public bool FlexZero { get; init; }
    public ulong Seed { get; init; } = 1;
}

/// <summary>A small synthetic run with known truth: base load, flexible bounds, occupancy, observed the way the options say.</summary>
internal sealed class SyntheticRun
{
    public const int SlotsPerDay = 96;
    public required AttackerView View { get; init; }
    public required GroundTruth Truth { get; init; }
    public required double[][] BaseKw { get; init; }
    public required double[][] FlexMinKw { get; init; }
    public required double[][] FlexDesiredKw { get; init; }
    public required bool[][] Occupied { get; init; }
    /// <summary>Per household and round: weighted mean of the uploaded samples' base load (the multi-sample ratio attack's target).</summary>
    public required double[][] UploadWeightedBaseKw { get; init; }

    public static InputFeature[] Features { get; } =
    [
        new("baseLoad", Quantity.BaseLoad, 2.0, 0),
        new("flexMinimum", Quantity.FlexMinimum, 4.0, 0),
        new("flexDesired", Quantity.FlexDesired, 4.0, 0),
        new("hourOfDay", null, IsPublic: true),
    ];

    public static (double[][] Base, double[][] Min, double[][] Des, bool[][] Occ) Draw(int households, int days, ulong seed)
    {
        var rng = new Random((int)seed);
        int T = days * SlotsPerDay;
        var b = new double[households][];
        var mn = new double[households][];
        var ds = new double[households][];
        var oc = new bool[households][];
        for (int m = 0; m < households; m++)
        {
            b[m] = new double[T]; mn[m] = new double[T]; ds[m] = new double[T]; oc[m] = new bool[T];
            double standby = 0.1 + 0.2 * rng.NextDouble(), active = 0.3 + 0.8 * rng.NextDouble();
            for (int d = 0; d < days; d++)
            {
                int leave = 30 + rng.Next(8), back = 64 + rng.Next(12);
                bool stayHome = rng.NextDouble() < 0.2;
                double level = rng.NextDouble();
                for (int s = 0; s < SlotsPerDay; s++)
                {
                    int t = d * SlotsPerDay + s;
                    bool home = stayHome || s < leave || s >= back;
                    bool awake = s >= 26 && s < 90;
                    oc[m][t] = home;
                    double h = s / 4.0;
                    double evening = Math.Max(0, 1 - Math.Abs(h - 19) / 2.5);
                    b[m][t] = standby * (1 + 0.1 * rng.NextDouble()) + (home && awake ? active * (0.6 + evening) * (0.8 + 0.4 * rng.NextDouble()) : 0);
                    mn[m][t] = home && s >= back ? 0.5 * level : 0;
                    ds[m][t] = mn[m][t] + (home ? 1 + 2 * level + 0.2 * rng.NextDouble() : 0.3 * rng.NextDouble());
                }
            }
        }
        return (b, mn, ds, oc);
    }

    public static SyntheticRun Build(SyntheticOptions o)
    {
        int M = o.Households, T = o.Days * SlotsPerDay, H = o.Neurons, n = Features.Length;
        (double[][] baseKw, double[][] minKw, double[][] desKw, bool[][] occ) = Draw(M, o.Days, o.Seed);
        if (o.FlexZero)
            for (int m = 0; m < M; m++) { Array.Clear(minKw[m]); Array.Clear(desKw[m]); }
        var rng = new Random((int)o.Seed + 1000);
        var pub = new double[T * n];
        for (int t = 0; t < T; t++) pub[t * n + 3] = (t % SlotsPerDay) / 96.0;
        int buses = (M + o.HouseholdsPerBus - 1) / o.HouseholdsPerBus;
        var busIds = Enumerable.Range(0, buses).Select(i => $"bus{i + 1}").ToArray();
        var households = new List<HouseholdView>();
        var uploadTarget = new double[M][];
        var setpoints = new double[M][];
        for (int m = 0; m < M; m++)
        {
            setpoints[m] = new double[T];
            for (int t = 0; t < T; t++) setpoints[m][t] = minKw[m][t] + 0.5 * (desKw[m][t] - minKw[m][t]);
        }
        for (int m = 0; m < M; m++)
        {
            var sums = new float[T * H];
            var rounds = new List<RoundObservation>();
            int roundCount = (T + o.SlotsPerRound - 1) / o.SlotsPerRound;
            uploadTarget[m] = new double[roundCount];
            for (int r = 0; r < roundCount; r++)
            {
                int start = r * o.SlotsPerRound, count = Math.Min(o.SlotsPerRound, T - start);
                var w = new double[H * n];
                for (int i = 0; i < w.Length; i++) w[i] = o.Float32 ? (float)(rng.NextDouble() * 2 - 1) : rng.NextDouble() * 2 - 1;
                for (int t = start; t < start + count; t++)
                {
                    double[] x = Feature(baseKw[m][t], minKw[m][t], desKw[m][t], pub[t * n + 3]);
                    for (int k = 0; k < H; k++)
                    {
                        if (o.PartialSumsAreNoise) { sums[t * H + k] = (float)(rng.NextDouble() * 2 - 1); continue; }
                        if (o.Float32)
                        {
                            float s = 0;
                            for (int j = 0; j < n; j++) s += (float)w[k * n + j] * (float)x[j];
                            sums[t * H + k] = s;
                        }
                        else
                        {
                            double s = 0;
                            for (int j = 0; j < n; j++) s += w[k * n + j] * x[j];
                            sums[t * H + k] = (float)s; // float32 on the wire, as in the protocol
                        }
                    }
                }
                var updates = new List<FirstLayerUpdate>();
                if (o.UploadSamples > 0)
                {
                    var dw = new double[H * n];
                    var db = new double[H];
                    int samples = Math.Min(o.UploadSamples, count);
                    for (int s = 0; s < samples; s++)
                    {
                        int t = start + s;
                        double[] x = Feature(baseKw[m][t], minKw[m][t], desKw[m][t], pub[t * n + 3]);
                        double weight = 0.5 + rng.NextDouble();
                        for (int k = 0; k < H; k++)
                        {
                            double g = -0.01 * weight * (0.2 + rng.NextDouble()) * (k % 2 == 0 ? 1 : 1.5);
                            db[k] += g;
                            for (int j = 0; j < n; j++) dw[k * n + j] += g * x[j];
                        }
                    }
                    if (o.UploadsAreNoise)
                        for (int i = 0; i < dw.Length; i++) dw[i] = (rng.NextDouble() * 2 - 1) * 0.01;
                    updates.Add(new FirstLayerUpdate(H, dw, db));
                    // Target of the ratio attack: Σ_o Δb_o ΔW_o / Σ Δb_o² in the base feature, in kW.
                    double num = 0, den = 0;
                    for (int k = 0; k < H; k++) { num += db[k] * dw[k * n]; den += db[k] * db[k]; }
                    uploadTarget[m][r] = Features[0].KwPerUnit * num / den;
                }
                rounds.Add(new RoundObservation
                {
                    StartSlot = start, SlotCount = count, BroadcastWeights = o.PlainWeights ? w : null, Updates = updates,
                    LocalSamples = o.UploadSamples,
                });
            }
            var reported = new Dictionary<Quantity, double[]>();
            if (o.HouseholdProjectionInputs)
            {
                reported[Quantity.BaseLoad] = baseKw[m];
                reported[Quantity.FlexMinimum] = minKw[m];
                reported[Quantity.FlexDesired] = desKw[m];
            }
            households.Add(new HouseholdView
            {
                Id = $"home-{m + 1:00}", Bus = m / o.HouseholdsPerBus, PartialSums = sums, Rounds = rounds, ReportedKw = reported,
                SetpointKw = setpoints[m], Priors = Priors(T), PriorTotalKw = PriorTotal(T),
            });
        }
        var busTotals = new Dictionary<Quantity, double[]>();
        if (o.BusAggregateInputs)
            foreach ((Quantity q, double[][] v) in new[] { (Quantity.BaseLoad, baseKw), (Quantity.FlexMinimum, minKw), (Quantity.FlexDesired, desKw) })
            {
                var tot = new double[buses * T];
                for (int m = 0; m < M; m++)
                    for (int t = 0; t < T; t++) tot[(m / o.HouseholdsPerBus) * T + t] += v[m][t];
                busTotals[q] = tot;
            }
        var busMeter = new double[buses * T];
        var meter = new double[T];
        for (int t = 0; t < T; t++)
        {
            double total = 5.0; // fixed loads
            for (int m = 0; m < M; m++)
            {
                double kw = baseKw[m][t] + setpoints[m][t];
                busMeter[(m / o.HouseholdsPerBus) * T + t] += kw;
                total += kw;
            }
            meter[t] = total + 1e-4 * total * total; // losses ∝ import²
        }
        (double[][] refBase, _, _, bool[][] refOcc) = Draw(40, 4, o.Seed + 77);
        (double[] tau, double[] prob) = OccupancyThresholds.Calibrate(refBase, refOcc, SlotsPerDay);
        var view = new AttackerView
        {
            SlotCount = T, FirstLayerSize = H, Features = Features, PublicFeatureValues = pub, BusIds = busIds, Households = households,
            BusTotalsKw = busTotals, BusMeterKw = busMeter, SubstationMeterKw = meter, KnownOtherLoadKw = Enumerable.Repeat(5.0, T).ToArray(),
            OccupancyThresholdKw = tau, PriorHomeProbability = prob,
        };
        var truth = GroundTruth.FromSeries(households.Select(h => h.Id).ToArray(),
            new Dictionary<Quantity, double[][]> { [Quantity.BaseLoad] = baseKw, [Quantity.FlexMinimum] = minKw, [Quantity.FlexDesired] = desKw }, occ);
        return new SyntheticRun
        {
            View = view, Truth = truth, BaseKw = baseKw, FlexMinKw = minKw, FlexDesiredKw = desKw, Occupied = occ, UploadWeightedBaseKw = uploadTarget,
        };
    }

    private static double[] Feature(double b, double mn, double ds, double hour) =>
        [b / Features[0].KwPerUnit, mn / Features[1].KwPerUnit, ds / Features[2].KwPerUnit, hour];

    /// <summary>A public prior that knows the shape of a day but nothing of any one household.</summary>
    public static Dictionary<Quantity, QuantityPrior> Priors(int T)
    {
        var b = new double[T];
        var mn = new double[T];
        var ds = new double[T];
        for (int t = 0; t < T; t++)
        {
            int s = t % SlotsPerDay;
            double h = s / 4.0;
            bool awake = s >= 26 && s < 90;
            bool likelyHome = s < 32 || s >= 70;
            b[t] = 0.2 + (awake ? (likelyHome ? 0.6 : 0.15) * (1 + Math.Max(0, 1 - Math.Abs(h - 19) / 2.5)) : 0);
            mn[t] = s >= 70 ? 0.25 : 0;
            ds[t] = mn[t] + (likelyHome ? 2.0 : 0.3);
        }
        return new Dictionary<Quantity, QuantityPrior>
        {
            [Quantity.BaseLoad] = new(b, 0.4), [Quantity.FlexMinimum] = new(mn, 0.25), [Quantity.FlexDesired] = new(ds, 1.0),
        };
    }

    public static double[] PriorTotal(int T)
    {
        Dictionary<Quantity, QuantityPrior> p = Priors(T);
        var tot = new double[T];
        for (int t = 0; t < T; t++) tot[t] = p[Quantity.BaseLoad].MeanKw[t] + 0.5 * (p[Quantity.FlexMinimum].MeanKw[t] + p[Quantity.FlexDesired].MeanKw[t]);
        return tot;
    }
}
