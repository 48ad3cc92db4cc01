namespace FedGrid.Audit;

/// <summary>A private quantity of a household that the auditor tries to reconstruct, slot by slot, in kW.</summary>
public enum Quantity
{
    /// <summary>Uncontrollable (base) load.</summary>
    BaseLoad,
    /// <summary>Least power of the flexible appliances (Σ of their minimums).</summary>
    FlexMinimum,
    /// <summary>Desired power of the flexible appliances (Σ of their desired powers).</summary>
    FlexDesired,
}

/// <summary>What carried the information an attack used.</summary>
public enum Channel
{
    /// <summary>First-layer partial sums a_m(t).</summary>
    PartialSums,
    /// <summary>Parameters uploaded after local training.</summary>
    Uploads,
    /// <summary>Inputs of the safety projection (per household or per bus).</summary>
    ProjectionInputs,
    /// <summary>What the operator's own bus meters reveal without any message.</summary>
    PhysicalFloor,
    /// <summary>All channels combined.</summary>
    Joint,
}

/// <summary>Names used in JSON output and reports.</summary>
public static class AuditNames
{
    /// <summary>Every quantity, in order.</summary>
    public static IReadOnlyList<Quantity> Quantities { get; } = [Quantity.BaseLoad, Quantity.FlexMinimum, Quantity.FlexDesired];

    /// <summary>JSON name of a quantity: baseLoad, flexMinimum, flexDesired.</summary>
    /// <param name="q">The quantity.</param>
    /// <returns>The name.</returns>
    public static string Of(Quantity q) => q switch
    {
        Quantity.BaseLoad => "baseLoad",
        Quantity.FlexMinimum => "flexMinimum",
        _ => "flexDesired",
    };

    /// <summary>JSON name of a channel: partialSums, uploads, projectionInputs, physicalFloor, joint.</summary>
    /// <param name="c">The channel.</param>
    /// <returns>The name.</returns>
    public static string Of(Channel c) => c switch
    {
        Channel.PartialSums => "partialSums",
        Channel.Uploads => "uploads",
        Channel.ProjectionInputs => "projectionInputs",
        Channel.PhysicalFloor => "physicalFloor",
        _ => "joint",
    };
}

/// <summary>
/// One feature of a household's input block x_m, as declared in the run's (public) network description:
/// the value in kW is <c>OffsetKw + KwPerUnit · x</c>. Public features (price, time of day) are known to the coordinator;
/// private features without a <see cref="Quantity"/> (e.g. a tank's charge) are unknowns the auditor does not score.
/// </summary>
/// <param name="Name">Feature name.</param>
/// <param name="Quantity">The private quantity this feature encodes, or null.</param>
/// <param name="KwPerUnit">Scale, kW per input unit (only for features with a quantity).</param>
/// <param name="OffsetKw">Offset, kW.</param>
/// <param name="IsPublic">Whether the coordinator knows the value anyway (its values are in <see cref="AttackerView.PublicFeatureValues"/>, NaN where unknown).</param>
public sealed record InputFeature(string Name, Quantity? Quantity, double KwPerUnit = 1, double OffsetKw = 0, bool IsPublic = false);

/// <summary>
/// What the coordinator learnt about one household in one training round: the first-layer weights of the
/// household's block it broadcast (null when the block never leaves the household, as under private columns)
/// and the change the household uploaded after local training.
/// </summary>
public sealed record RoundObservation
{
    /// <summary>First slot (inclusive) whose partial sums were computed with this round's weights.</summary>
    public required int StartSlot { get; init; }

    /// <summary>Number of slots in the round.</summary>
    public required int SlotCount { get; init; }

    /// <summary>Broadcast W_m, H₁ × n_m row-major, or null when unknown to the coordinator.</summary>
    public double[]? BroadcastWeights { get; init; }

    /// <summary>
    /// Uploaded first-layer changes, one entry per network with a split first layer (e.g. actor and critic):
    /// ΔW_m (H × n_m row-major, uploaded minus broadcast) and Δb (H). Empty when no first-layer block is uploaded.
    /// </summary>
    public IReadOnlyList<FirstLayerUpdate> Updates { get; init; } = [];

    /// <summary>Local samples the upload was trained on, when the protocol declares it (0 = unknown).</summary>
    public int LocalSamples { get; init; }

    /// <summary>First slot of the samples the upload was trained on (by the protocol's rule), or −1 for the round's own slots.</summary>
    public int TrainingStartSlot { get; init; } = -1;
    /// <summary>
    /// Whether the household uploaded in this round as masked ring words only (masked uploads): the coordinator holds the
    /// round's sum over the participants, no individual update, so <see cref="Updates"/> stays empty.
    /// </summary>
    public bool MaskedUpload { get; init; }
}

/// <summary>An uploaded change of one network's first layer for one household block.</summary>
/// <param name="Neurons">H, first-layer width.</param>
/// <param name="WeightDelta">ΔW_m, H × n_m row-major.</param>
/// <param name="BiasDelta">Δb, H.</param>
public sealed record FirstLayerUpdate(int Neurons, double[] WeightDelta, double[] BiasDelta)
{
    /// <summary>
    /// Half-widths of the rounding intervals of <see cref="WeightDelta"/> (same layout), or null when unknown: the uploaded
    /// parameter is the household's trained value rounded to the wire format (float32), so its unrounded change lies within
    /// ± this of the delta (half the float32 gap at the uploaded value).
    /// </summary>
    public double[]? WeightRounding { get; init; }

    /// <summary>Half-widths of the rounding intervals of <see cref="BiasDelta"/>, or null when unknown (see <see cref="WeightRounding"/>).</summary>
    public double[]? BiasRounding { get; init; }

    /// <summary>Half the float32 gap at <paramref name="value"/> (the larger of the gaps below and above): round-to-nearest moves a real number that rounds to it by at most this much.</summary>
    /// <param name="value">A float32 value.</param>
    /// <returns>The half-gap.</returns>
    public static double HalfGap(float value) =>
        0.5 * Math.Max((double)MathF.BitIncrement(value) - value, value - (double)MathF.BitDecrement(value));
}

/// <summary>Public prior of one quantity for one household: a mean profile over the horizon and a typical spread.</summary>
/// <param name="MeanKw">Prior mean at each slot, kW.</param>
/// <param name="StdKw">Typical prior error (one standard deviation), kW.</param>
public sealed record QuantityPrior(double[] MeanKw, double StdKw);

/// <summary>Everything the coordinator holds about one household.</summary>
public sealed record HouseholdView
{
    /// <summary>Household id.</summary>
    public required string Id { get; init; }

    /// <summary>Index of its bus in <see cref="AttackerView.BusIds"/>.</summary>
    public required int Bus { get; init; }

    /// <summary>Partial sums a_m(t) as received (float32), slots × H₁ row-major; NaN rows where the household did not send.</summary>
    public float[]? PartialSums { get; init; }

    /// <summary>Training rounds in time order.</summary>
    public IReadOnlyList<RoundObservation> Rounds { get; init; } = [];

    /// <summary>Projection inputs sent in the per-household form, by quantity (kW per slot); empty in the bus-aggregate form.</summary>
    public IReadOnlyDictionary<Quantity, double[]> ReportedKw { get; init; } = new Dictionary<Quantity, double[]>();

    /// <summary>Final setpoints the coordinator returned, kW per slot (it computed them), or null.</summary>
    public double[]? SetpointKw { get; init; }

    /// <summary>Public priors by quantity.</summary>
    public required IReadOnlyDictionary<Quantity, QuantityPrior> Priors { get; init; }

    /// <summary>Prior mean of the household's total consumption (base + flexible) per slot, kW.</summary>
    public required double[] PriorTotalKw { get; init; }
}

/// <summary>
/// The attacker's whole world: what crossed the wire plus declared side information. Ground truth is not
/// part of it and cannot be (it lives in <c>FedGrid.Audit.Scoring</c>).
/// </summary>
public sealed record AttackerView
{
    /// <summary>Slots in the horizon.</summary>
    public required int SlotCount { get; init; }

    /// <summary>Slots per day (96 for 15-minute slots).</summary>
    public int SlotsPerDay { get; init; } = 96;

    /// <summary>First-layer width H₁.</summary>
    public required int FirstLayerSize { get; init; }

    /// <summary>Features of one household's input block, in order.</summary>
    public required IReadOnlyList<InputFeature> Features { get; init; }

    /// <summary>Values of the public features per slot (slots × n row-major; entries of private features ignored), or null.</summary>
    public double[]? PublicFeatureValues { get; init; }

    /// <summary>Bus ids of the feeder.</summary>
    public required IReadOnlyList<string> BusIds { get; init; }

    /// <summary>Households.</summary>
    public required IReadOnlyList<HouseholdView> Households { get; init; }

    /// <summary>Projection inputs in the bus-aggregate form: bus totals by quantity (buses × slots row-major), or empty.</summary>
    public IReadOnlyDictionary<Quantity, double[]> BusTotalsKw { get; init; } = new Dictionary<Quantity, double[]>();

    /// <summary>The operator's bus meters: total household consumption per bus (buses × slots), kW, or null.</summary>
    public double[]? BusMeterKw { get; init; }

    /// <summary>Substation meter: real power imported per slot, kW, or null when not declared as side information.</summary>
    public double[]? SubstationMeterKw { get; init; }

    /// <summary>Known loads beside the households (fixed bus loads), kW per slot, or null for none.</summary>
    public double[]? KnownOtherLoadKw { get; init; }

    /// <summary>
    /// Occupancy rule calibrated on public reference data: home when base load exceeds the threshold of the
    /// slot of day (length <see cref="SlotsPerDay"/>; −∞ means "always home at this slot").
    /// </summary>
    public double[]? OccupancyThresholdKw { get; init; }

    /// <summary>Public prior probability that a household is home, per slot of day (length <see cref="SlotsPerDay"/>), or null.</summary>
    public double[]? PriorHomeProbability { get; init; }

    /// <summary>Number of features n_m of a block.</summary>
    public int FeatureCount => Features.Count;

    /// <summary>Index of the feature encoding <paramref name="q"/>, or −1.</summary>
    /// <param name="q">The quantity.</param>
    /// <returns>The index.</returns>
    public int FeatureIndex(Quantity q)
    {
        for (int i = 0; i < Features.Count; i++)
            if (Features[i].Quantity == q) return i;
        return -1;
    }
}
