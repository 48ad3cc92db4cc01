namespace FedGrid.Audit;

/// <summary>
/// One attack's estimate of one quantity of one household over the whole horizon, with the attack's own
/// estimate of its error variance per slot (from the observation model only, never from ground truth).
/// Slots the attack learnt nothing about carry the attacker's prior.
/// </summary>
/// <param name="Channel">Channel the attack used.</param>
/// <param name="Attack">Attack name.</param>
/// <param name="Quantity">Quantity estimated.</param>
/// <param name="Household">Household index in the view.</param>
/// <param name="EstimateKw">Estimate per slot, kW.</param>
/// <param name="VarianceKw2">The attack's error variance per slot, kW².</param>
public sealed record Reconstruction(Channel Channel, string Attack, Quantity Quantity, int Household, double[] EstimateKw, double[] VarianceKw2);

/// <summary>
/// What an observation map lets the coordinator identify for one household, computed without ground truth.
/// </summary>
/// <param name="Household">Household index.</param>
/// <param name="Channel">Channel.</param>
/// <param name="Attack">Attack name.</param>
/// <param name="Rank">Smallest numerical rank of the household's observation map over the rounds.</param>
/// <param name="Unknowns">Unknowns per observation (features of the block).</param>
/// <param name="ConditionNumber">Largest condition number over the rounds (NaN where it does not apply).</param>
/// <param name="BaseLoadBoundStdKw">Cramér–Rao-style bound on the base-load error (one standard deviation, kW) where the map is linear Gaussian; NaN otherwise.</param>
/// <param name="Note">What limits identification, in words.</param>
public sealed record Identifiability(int Household, Channel Channel, string Attack, int Rank, int Unknowns, double ConditionNumber, double BaseLoadBoundStdKw, string Note);

/// <summary>An occupancy guess per slot for one household.</summary>
/// <param name="Household">Household index.</param>
/// <param name="Home">True where the guess is "someone is home".</param>
public sealed record OccupancyGuess(int Household, bool[] Home);

/// <summary>Everything the attacks produced from one <see cref="AttackerView"/>.</summary>
/// <param name="Reconstructions">Per channel × attack × household × quantity estimates, the joint ones included.</param>
/// <param name="Identifiability">Per household observability figures.</param>
/// <param name="Occupancy">Occupancy inferred from the joint base-load estimate.</param>
/// <param name="PriorOccupancy">Occupancy guessed from the public prior alone.</param>
/// <param name="Notes">What could not be attacked and why.</param>
public sealed record AttackResults(IReadOnlyList<Reconstruction> Reconstructions, IReadOnlyList<Identifiability> Identifiability,
    IReadOnlyList<OccupancyGuess> Occupancy, IReadOnlyList<OccupancyGuess> PriorOccupancy, IReadOnlyList<string> Notes);
