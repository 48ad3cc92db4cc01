using FedGrid.Grid.Feeders;
using FedGrid.Grid.Optimization;
using FedGrid.Grid.PowerFlow;

namespace FedGrid.Grid.Projection;

/// <summary>
/// A flexible load the projection may move: a household appliance, a whole household, or — in the
/// bus-aggregate scheme — the sum of the flexible loads of all households on one bus. Its reactive
/// power follows its real power: q = p · <see cref="TanPhi"/>.
/// </summary>
/// <param name="Id">Name used in messages and reports.</param>
/// <param name="BusId">Id of the feeder bus it is connected to.</param>
/// <param name="TanPhi">Ratio of reactive to real power (tan φ of its power factor; 0 for unity).</param>
/// <param name="Weight">Weight w of its squared distance in the objective (positive).</param>
public sealed record FlexibleUnit(string Id, string BusId, double TanPhi = 0, double Weight = 1);

/// <summary>
/// One slot's inputs to the projection, in kW and kvar, in caller-owned arrays that are reused
/// slot after slot: the fixed (base) load of every bus, and every unit's box and proposed setpoint.
/// </summary>
public sealed class ProjectionInput
{
    /// <summary>Allocates arrays for <paramref name="busCount"/> buses and <paramref name="unitCount"/> units (all zero).</summary>
    public ProjectionInput(int busCount, int unitCount)
    {
        BaseLoadKw = new double[busCount];
        BaseLoadKvar = new double[busCount];
        MinKw = new double[unitCount];
        MaxKw = new double[unitCount];
        ProposalKw = new double[unitCount];
    }

    /// <summary>Fixed real load per bus (feeder bus order), kW; negative means net generation.</summary>
    public double[] BaseLoadKw { get; }

    /// <summary>Fixed reactive load per bus, kvar.</summary>
    public double[] BaseLoadKvar { get; }

    /// <summary>Lowest setpoint of each unit, kW (≥ 0).</summary>
    public double[] MinKw { get; }

    /// <summary>Highest setpoint of each unit, kW (≥ <see cref="MinKw"/>).</summary>
    public double[] MaxKw { get; }

    /// <summary>Proposed setpoint of each unit, kW, inside its box.</summary>
    public double[] ProposalKw { get; }
}

/// <summary>How a projection ended.</summary>
public enum ProjectionStatus
{
    /// <summary>The proposal already satisfies every limit in the exact AC power flow; returned unchanged, nothing solved.</summary>
    AlreadyFeasible,
    /// <summary>Projected, and the exact AC power flow at the projected setpoints satisfies every limit.</summary>
    Projected,
    /// <summary>Projected, but the exact AC check still finds violations after the allowed tightening attempts; see the violations.</summary>
    Unverified,
    /// <summary>No setpoints inside the boxes satisfy the limits (of the formulation); see the binding limits.</summary>
    Infeasible,
    /// <summary>
    /// The cone solver stopped without a solution or a certificate; see the solver status. The
    /// setpoints are then every unit's minimum when that passes the exact AC check
    /// (<see cref="ProjectionResult.FellBackToMinimum"/>), else the proposal, unverified.
    /// </summary>
    SolverFailure,
}

/// <summary>Settings of <see cref="SetpointProjector"/>.</summary>
/// <param name="VerificationTolerancePu">Violation the exact AC check tolerates: pu of voltage and of import, relative for current.</param>
/// <param name="MaxAttempts">Solves at most per projection (the first plus tightened re-solves).</param>
/// <param name="TighteningMarginPu">Extra margin added to each tightening beyond the violation found.</param>
/// <param name="LossWeightPerKw">Weight of the line losses (kW) in the cone objective; a small positive weight makes the cone relaxation exact (Farivar &amp; Low 2013) without moving the setpoints noticeably.</param>
/// <param name="Solver">Interior-point settings; null means <see cref="DefaultSolver"/>.</param>
public sealed record ProjectionOptions(
    double VerificationTolerancePu = 1e-6,
    int MaxAttempts = 4,
    double TighteningMarginPu = 1e-5,
    double LossWeightPerKw = 1e-3,
    SolverOptions? Solver = null)
{
    /// <summary>The default settings.</summary>
    public static ProjectionOptions Default { get; } = new();

    /// <summary>
    /// The solver settings used when none are given: the defaults with warm start on. Slot after slot
    /// the previous slot's solution is a good start: measured on the Baran &amp; Wu feeder with
    /// proposals alternating between two slots, warm start halves the iterations (16.5 → 8.5 at
    /// 33 buses, 24 → 13.5 at 1650 buses).
    /// </summary>
    public static SolverOptions DefaultSolver { get; } = new(WarmStart: true);
}

/// <summary>
/// The outcome of one projection; a reusable object that <see cref="SetpointProjector.Project(ProjectionInput, ProjectionResult)"/>
/// overwrites (arrays are allocated once for the projector's feeder and units).
/// </summary>
public sealed class ProjectionResult
{
    internal ProjectionResult(int busCount, int unitCount)
    {
        SetpointKw = new double[unitCount];
        VoltagePu = new double[busCount];
        RelaxationGapPu = new double[busCount];
        AcFlow = new PowerFlowResult(busCount);
        AcFlowBefore = new PowerFlowResult(busCount);
    }

    /// <summary>How the projection ended.</summary>
    public ProjectionStatus Status { get; internal set; }

    /// <summary>Final setpoint of each unit, kW (the proposal when already feasible or infeasible; see <see cref="ProjectionStatus.SolverFailure"/> for a failed solve).</summary>
    public double[] SetpointKw { get; }

    /// <summary>Σ w_u (setpoint_u − proposal_u)², kW².</summary>
    public double Objective { get; internal set; }

    /// <summary>Objective of the last cone program solved (including the formulation's loss term); NaN when none was solved.</summary>
    public double ConeObjective { get; internal set; }

    /// <summary>Bus voltage magnitudes of the formulation's solution, pu (NaN when none was solved).</summary>
    public double[] VoltagePu { get; }

    /// <summary>Relaxation gap ℓ·v_i − P² − Q² of each bus's parent line, pu² (0 at the slack and for formulations without ℓ).</summary>
    public double[] RelaxationGapPu { get; }

    /// <summary>Largest relaxation gap over the lines, pu².</summary>
    public double MaxRelaxationGap { get; internal set; }

    /// <summary>Whether a failed solve fell back to every unit at its minimum, which passed the exact AC check.</summary>
    public bool FellBackToMinimum { get; internal set; }

    /// <summary>Whether the exact AC power flow at <see cref="SetpointKw"/> converged and satisfies every limit within tolerance.</summary>
    public bool AcVerified { get; internal set; }

    /// <summary>Exact AC power flow at the final setpoints.</summary>
    public PowerFlowResult AcFlow { get; }

    /// <summary>Exact AC power flow at the proposal.</summary>
    public PowerFlowResult AcFlowBefore { get; }

    /// <summary>Largest voltage-limit violation at the proposal, pu (0 when none).</summary>
    public double MaxVoltageViolationPuBefore { get; internal set; }

    /// <summary>Largest voltage-limit violation at the final setpoints, pu (0 when none).</summary>
    public double MaxVoltageViolationPuAfter { get; internal set; }

    /// <summary>Limits the final setpoints still break in the exact AC check (empty unless <see cref="ProjectionStatus.Unverified"/>).</summary>
    public IReadOnlyList<LimitViolation> Violations { get; internal set; } = [];

    /// <summary>Limits that together make the problem infeasible (from the solver's Farkas certificate), when <see cref="ProjectionStatus.Infeasible"/>.</summary>
    public IReadOnlyList<string> BindingLimits { get; internal set; } = [];

    /// <summary>Status of the last cone solve.</summary>
    public SolverStatus SolverStatus { get; internal set; }

    /// <summary>Interior-point iterations over all attempts.</summary>
    public int Iterations { get; internal set; }

    /// <summary>Cone solves performed (0 when already feasible).</summary>
    public int Attempts { get; internal set; }

    /// <summary>Wall time of the cone solves, ms.</summary>
    public double SolveMs { get; internal set; }

    /// <summary>Wall time of the whole projection (checks included), ms.</summary>
    public double TotalMs { get; internal set; }
}

/// <summary>
/// The feeder limits a formulation enforces, per unit, indexed by bus (current limits on the bus's
/// parent line). The projector starts from the feeder's limits and tightens them when the exact
/// AC check finds a violation.
/// </summary>
public sealed class FeederLimits
{
    /// <summary>The limits of <paramref name="net"/> as the feeder states them (a formulation used outside the projector starts from these).</summary>
    public FeederLimits(RadialNetwork net)
    {
        ArgumentNullException.ThrowIfNull(net);
        VMinPu = (double[])net.VMinPu.Clone();
        VMaxPu = (double[])net.VMaxPu.Clone();
        CurrentLimitPu = (double[])net.CurrentLimitPu.Clone();
        ImportLimitPu = net.ImportLimitPu;
    }

    /// <summary>Lower voltage limits, pu.</summary>
    public double[] VMinPu { get; }

    /// <summary>Upper voltage limits, pu.</summary>
    public double[] VMaxPu { get; }

    /// <summary>Parent-line current limits, pu.</summary>
    public double[] CurrentLimitPu { get; }

    /// <summary>Substation import limit, pu.</summary>
    public double ImportLimitPu { get; set; }

    internal void Reset(RadialNetwork net)
    {
        net.VMinPu.CopyTo(VMinPu, 0);
        net.VMaxPu.CopyTo(VMaxPu, 0);
        net.CurrentLimitPu.CopyTo(CurrentLimitPu, 0);
        ImportLimitPu = net.ImportLimitPu;
    }
}

/// <summary>A flexible unit's setpoint variable and what one kW of it adds at its bus, per unit of the feeder's power base.</summary>
/// <param name="Setpoint">The unit's setpoint variable (kW).</param>
/// <param name="PPuPerKw">Real power per kW, pu (1 / (1000 × base MVA)).</param>
/// <param name="QPuPerKw">Reactive power per kW, pu (tan φ times <paramref name="PPuPerKw"/>).</param>
public readonly record struct UnitInjection(Variable Setpoint, double PPuPerKw, double QPuPerKw);

/// <summary>
/// A model of the feeder's physics that the projection problem is written against: given the
/// builder holding the unit setpoint variables, it adds its own variables and constraints linking
/// the bus injections to the limits. Implementations: <see cref="ConeRelaxationFormulation"/>
/// (default) and <see cref="LinearisedBranchFlowFormulation"/>.
/// </summary>
public interface IFeederFormulation
{
    /// <summary>Short name ("cone", "linear").</summary>
    string Name { get; }

    /// <summary>
    /// Adds the feeder's variables and constraints. <paramref name="unitsAtBus"/>[i] lists the units
    /// connected to bus i. Base loads and limits are written later through the returned object.
    /// </summary>
    IFormulatedFeeder Formulate(RadialNetwork network, ConeProgramBuilder builder, IReadOnlyList<UnitInjection>[] unitsAtBus, double lossWeightPerKw);
}

/// <summary>A formulation's constraints inside one built <see cref="ConeProgram"/>: rewritable data, and recovery of the physical state.</summary>
public interface IFormulatedFeeder
{
    /// <summary>Writes the base loads (per unit of the feeder's power base, per bus) into the program's right-hand sides.</summary>
    void SetBaseLoad(ConeProgram program, ReadOnlySpan<double> basePPu, ReadOnlySpan<double> baseQPu);

    /// <summary>Writes the limits (per unit of the feeder's bases) into the program's right-hand sides; the slack bus's base load enters the import limit.</summary>
    void SetLimits(ConeProgram program, FeederLimits limits, ReadOnlySpan<double> basePPu);

    /// <summary>Recovers bus voltages (pu) and the relaxation gap per line (pu² on the feeder's power base) from a solution x.</summary>
    void Recover(ReadOnlySpan<double> x, Span<double> voltagePu, Span<double> relaxationGapPu);

    /// <summary>Names the feeder limit held by cone row <paramref name="coneRow"/> (a row of G), or null if the row is not a feeder limit.</summary>
    string? DescribeRow(ConeProgram program, int coneRow, Feeder feeder);
}
