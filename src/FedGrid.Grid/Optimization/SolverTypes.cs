namespace FedGrid.Grid.Optimization;

/// <summary>How an interior-point solve ended.</summary>
public enum SolverStatus
{
    /// <summary>Primal and dual residuals and the duality gap are within tolerance; X, S, Y, Z hold the solution.</summary>
    Optimal,
    /// <summary>
    /// No x satisfies the constraints: Y and Z hold a Farkas certificate, normalised so that
    /// bᵀy + hᵀz = −1 with Aᵀy + Gᵀz ≈ 0 and z ∈ K.
    /// </summary>
    PrimalInfeasible,
    /// <summary>
    /// The objective is unbounded below (the dual has no feasible point): X holds a certificate
    /// direction with qᵀx = −1, Px ≈ 0, Ax ≈ 0 and −Gx ∈ K.
    /// </summary>
    DualInfeasible,
    /// <summary>The iteration limit was reached first; X, S, Y, Z hold the last iterate (scaled by 1/τ).</summary>
    IterationLimit,
    /// <summary>The factorisation failed, the iterates stopped moving, or values became non-finite.</summary>
    NumericalTrouble,
}

/// <summary>Settings of <see cref="InteriorPointSolver"/>.</summary>
/// <param name="FeasibilityTolerance">Relative primal and dual residual tolerance (ε_f).</param>
/// <param name="AbsoluteGapTolerance">Absolute duality gap tolerance.</param>
/// <param name="RelativeGapTolerance">Relative duality gap tolerance.</param>
/// <param name="InfeasibilityTolerance">Tolerance of the infeasibility certificates (residual of the certificate per unit of its objective).</param>
/// <param name="MaxIterations">Iteration limit.</param>
/// <param name="StaticRegularization">δ added to the (1,1) block and subtracted from the (2,2) block of the KKT matrix.</param>
/// <param name="RefinementSteps">Iterative refinement steps per KKT solve at most.</param>
/// <param name="StepFraction">Fraction of the step to the cone boundary taken.</param>
/// <param name="ReducedInfeasibilityTolerance">Looser certificate tolerance applied once, to the last iterate, when the iteration stops on numerical trouble or the iteration limit (infeasible problems drive τ → 0, where directions lose accuracy).</param>
/// <param name="WarmStart">Start from the previous solve's solution (pushed into the cone interior) instead of the default initial point.</param>
public sealed record SolverOptions(
    double FeasibilityTolerance = 1e-9,
    double AbsoluteGapTolerance = 1e-9,
    double RelativeGapTolerance = 1e-9,
    double InfeasibilityTolerance = 1e-8,
    int MaxIterations = 100,
    double StaticRegularization = 1e-9,
    int RefinementSteps = 2,
    double StepFraction = 0.99,
    bool WarmStart = false,
    double ReducedInfeasibilityTolerance = 1e-5)
{
    /// <summary>The default settings.</summary>
    public static SolverOptions Default { get; } = new();
}

/// <summary>Summary of one solve. Vectors are read from the solver (<see cref="InteriorPointSolver.X"/> etc.).</summary>
/// <param name="Status">How the solve ended.</param>
/// <param name="Iterations">Interior-point iterations performed.</param>
/// <param name="PrimalObjective">½xᵀPx + qᵀx + c₀ at the returned x.</param>
/// <param name="DualObjective">−½xᵀPx − bᵀy − hᵀz + c₀.</param>
/// <param name="PrimalResidual">‖(Ax − b, Gx + s − h)‖∞ at the returned point.</param>
/// <param name="DualResidual">‖Px + q + Aᵀy + Gᵀz‖∞ at the returned point.</param>
/// <param name="Gap">sᵀz, the complementarity gap, at the returned point.</param>
/// <param name="Tau">Final τ of the homogeneous embedding.</param>
/// <param name="Kappa">Final κ of the homogeneous embedding.</param>
public readonly record struct SolverResult(
    SolverStatus Status,
    int Iterations,
    double PrimalObjective,
    double DualObjective,
    double PrimalResidual,
    double DualResidual,
    double Gap,
    double Tau,
    double Kappa);
