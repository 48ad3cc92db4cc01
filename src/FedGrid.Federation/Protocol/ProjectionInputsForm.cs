using FedGrid.Federation.Schemes;
using FedGrid.Federation.Wire;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.Projection;

namespace FedGrid.Federation.Protocol;

/// <summary>A household as the coordinator registered it from its <see cref="JoinRequest"/>.</summary>
/// <param name="Index">Block index m.</param>
/// <param name="Id">Household id.</param>
/// <param name="BusId">Bus it is connected to.</param>
/// <param name="TanPhi">Reactive per real power.</param>
/// <param name="ProjectionPublicKey">Public key for the bus-aggregate form's pairwise masks (null when the household sent none).</param>
public sealed record RegisteredHousehold(int Index, string Id, string BusId, double TanPhi, byte[]? ProjectionPublicKey = null);

/// <summary>
/// How the safety projection's inputs reach the coordinator and its result gets back (DESIGN.md §2). The
/// <c>household</c> form (<see cref="HouseholdProjectionInputs"/>) sends each household's proposal, bounds and base load;
/// the <c>bus-aggregate</c> form (<see cref="BusAggregateProjectionInputs"/>) sends masked shares whose sum over a bus is
/// the bus's totals.
/// </summary>
public interface IProjectionInputsForm
{
    /// <summary>Form name ("household", "bus-aggregate").</summary>
    string Name { get; }

    /// <summary>Creates a household's side (before it joins: its index is not known yet).</summary>
    /// <param name="householdSeed">The household's own seed (the bus-aggregate form draws its masking key from it).</param>
    /// <returns>The household side.</returns>
    IHouseholdProjectionSide CreateHouseholdSide(ulong householdSeed);

    /// <summary>Creates the coordinator's side for a feeder and its registered households.</summary>
    /// <param name="feeder">The feeder.</param>
    /// <param name="households">Registered households in index order.</param>
    /// <param name="fixedLoads">Loads the operator knows at buses besides the households (kW, kvar by bus id).</param>
    /// <param name="options">Projection settings.</param>
    /// <returns>The coordinator side.</returns>
    ICoordinatorProjectionSide CreateCoordinatorSide(Feeder feeder, IReadOnlyList<RegisteredHousehold> households,
        IReadOnlyList<(string BusId, double Kw, double Kvar)> fixedLoads, ProjectionOptions? options);
}

/// <summary>A household's part of the projection exchange. Allocates nothing per step.</summary>
public interface IHouseholdProjectionSide
{
    /// <summary>Adds what the form needs to the join request (the bus-aggregate form: the household's public key).</summary>
    /// <param name="join">The join request.</param>
    void WriteJoin(JoinRequest join)
    {
    }

    /// <summary>Takes a set-up message the coordinator sends after admission; false when the message is not one.</summary>
    /// <param name="ownIndex">The household's index m.</param>
    /// <param name="message">The message.</param>
    /// <returns>Whether it was this form's set-up message.</returns>
    bool TryReadSetup(int ownIndex, CoordinatorMessage message) => false;

    /// <summary>Writes the step's projection inputs into a message the household sends.</summary>
    /// <param name="round">Round.</param>
    /// <param name="step">Decision step.</param>
    /// <param name="proposalKw">Proposed flexible setpoint, kW.</param>
    /// <param name="flexMinKw">Least flexible power, kW.</param>
    /// <param name="flexMaxKw">Desired flexible power, kW.</param>
    /// <param name="baseKw">Base load, kW.</param>
    /// <param name="message">The outgoing message (reused by the household).</param>
    void WriteInputs(int round, long step, double proposalKw, double flexMinKw, double flexMaxKw, double baseKw, HouseholdMessage message);

    /// <summary>Reads the setpoint to apply from the coordinator's reply; false when the message is not this form's reply.</summary>
    /// <param name="message">The reply.</param>
    /// <param name="flexMinKw">The household's least flexible power of the step, kW.</param>
    /// <param name="flexMaxKw">Its desired flexible power, kW.</param>
    /// <param name="setpointKw">Receives the setpoint, inside the box.</param>
    /// <param name="round">Receives the reply's round.</param>
    /// <param name="step">Receives the reply's step.</param>
    /// <returns>Whether the message was this form's reply.</returns>
    bool TryReadSetpoint(CoordinatorMessage message, double flexMinKw, double flexMaxKw, out double setpointKw, out int round, out long step);
}

/// <summary>The coordinator's part of the projection exchange.</summary>
public interface ICoordinatorProjectionSide
{
    /// <summary>Writes household m's set-up message, sent once after every household joined; false when the form sends none.</summary>
    /// <param name="household">m.</param>
    /// <param name="message">The outgoing message (its recipient and body are set).</param>
    /// <returns>Whether there is a message.</returns>
    bool TryWriteSetup(int household, CoordinatorMessage message) => false;

    /// <summary>Starts a step.</summary>
    void Begin();

    /// <summary>Takes one household's projection message; false when it is not this form's message.</summary>
    /// <param name="household">Sender.</param>
    /// <param name="message">The message (read during the call, not kept).</param>
    /// <returns>Whether it was this form's message.</returns>
    bool TryAdd(int household, HouseholdMessage message);

    /// <summary>Whether the form can project a step without some households' inputs (<see cref="AddDropped"/>).</summary>
    bool SupportsDropouts => false;

    /// <summary>
    /// Stands in for a dropped household whose inputs will not come: the form holds it at a conservative fixed load
    /// (household form: the desired power and base load it last reported).
    /// </summary>
    /// <param name="household">The dropped household.</param>
    void AddDropped(int household) =>
        throw new ProtocolException($"this projection form cannot project without household {household}'s inputs");

    /// <summary>Projects the step once every household was added (or stood in for).</summary>
    /// <returns>The projection's result (owned by the side, overwritten next step).</returns>
    ProjectionResult Project();

    /// <summary>Writes household m's reply for the projected step.</summary>
    /// <param name="household">m.</param>
    /// <param name="round">Round.</param>
    /// <param name="step">Step.</param>
    /// <param name="message">The outgoing message (its recipient and body are set).</param>
    void WriteReply(int household, int round, long step, CoordinatorMessage message);

    /// <summary>Writes the state one step leaves for the next (e.g. a solver's warm start) for a round-end checkpoint.</summary>
    /// <param name="writer">Where to write.</param>
    /// <exception cref="NotSupportedException">The form keeps state it cannot checkpoint.</exception>
    void WriteState(BinaryWriter writer) => throw new NotSupportedException($"the {GetType().Name} projection side cannot be checkpointed");

    /// <summary>Restores a state of <see cref="WriteState"/>.</summary>
    /// <param name="reader">Where to read.</param>
    void ReadState(BinaryReader reader) => throw new NotSupportedException($"the {GetType().Name} projection side cannot be checkpointed");
}

/// <summary>
/// The <c>household</c> form: every household sends <see cref="ProjectionInputs"/> (proposal, box, base load); the
/// coordinator projects with one <see cref="FlexibleUnit"/> per household (<see cref="SetpointProjector"/>) and returns
/// each its <see cref="FinalSetpoint"/>. Each bus's fixed load is the sum of its households' base loads (reactive at
/// each household's tan φ) plus the operator's known fixed loads.
/// </summary>
public sealed class HouseholdProjectionInputs : IProjectionInputsForm
{
    /// <summary>Form name.</summary>
    public const string FormName = "household";

    /// <inheritdoc />
    public string Name => FormName;

    /// <inheritdoc />
    public IHouseholdProjectionSide CreateHouseholdSide(ulong householdSeed) => new HouseholdSide();

    /// <inheritdoc />
    public ICoordinatorProjectionSide CreateCoordinatorSide(Feeder feeder, IReadOnlyList<RegisteredHousehold> households,
        IReadOnlyList<(string BusId, double Kw, double Kvar)> fixedLoads, ProjectionOptions? options) =>
        new CoordinatorSide(feeder, households, fixedLoads, options);

    internal static ProjectionOutcome Outcome(ProjectionStatus status) => status switch
    {
        ProjectionStatus.AlreadyFeasible => ProjectionOutcome.AlreadyFeasible,
        ProjectionStatus.Projected => ProjectionOutcome.Projected,
        ProjectionStatus.Unverified => ProjectionOutcome.Unverified,
        ProjectionStatus.Infeasible => ProjectionOutcome.Infeasible,
        _ => ProjectionOutcome.SolverFailure,
    };

    private sealed class HouseholdSide : IHouseholdProjectionSide
    {
        private readonly ProjectionInputs _inputs = new();

        public void WriteInputs(int round, long step, double proposalKw, double flexMinKw, double flexMaxKw, double baseKw, HouseholdMessage message)
        {
            _inputs.Round = round;
            _inputs.Step = step;
            _inputs.ProposalKw = proposalKw;
            _inputs.FlexMinKw = flexMinKw;
            _inputs.FlexMaxKw = flexMaxKw;
            _inputs.BaseKw = baseKw;
            message.ProjectionInputs = _inputs;
        }

        public bool TryReadSetpoint(CoordinatorMessage message, double flexMinKw, double flexMaxKw, out double setpointKw, out int round, out long step)
        {
            if (message.BodyCase != CoordinatorMessage.BodyOneofCase.Setpoint)
            {
                setpointKw = 0;
                round = -1;
                step = -1;
                return false;
            }
            round = message.Setpoint.Round;
            step = message.Setpoint.Step;
            double s = message.Setpoint.SetpointKw;
            if (!double.IsFinite(s))
            {
                throw new ProtocolException("final setpoint is not finite");
            }
            setpointKw = Math.Clamp(s, flexMinKw, flexMaxKw);
            return true;
        }
    }

    private sealed class CoordinatorSide : ICoordinatorProjectionSide
    {
        private readonly SetpointProjector _projector;
        private readonly ProjectionInput _input;
        private readonly ProjectionResult _result;
        private readonly double[] _fixedKw, _fixedKvar, _tanPhi;
        private readonly int[] _bus;
        private readonly bool[] _seen, _known;
        private readonly double[] _lastMaxKw, _lastBaseKw;
        private readonly FinalSetpoint[] _replies;

        public CoordinatorSide(Feeder feeder, IReadOnlyList<RegisteredHousehold> households, IReadOnlyList<(string BusId, double Kw, double Kvar)> fixedLoads, ProjectionOptions? options)
        {
            var units = new FlexibleUnit[households.Count];
            _bus = new int[households.Count];
            _tanPhi = new double[households.Count];
            for (int i = 0; i < households.Count; i++)
            {
                RegisteredHousehold h = households[i];
                units[i] = new FlexibleUnit(h.Id, h.BusId, h.TanPhi);
                _bus[i] = feeder.IndexOf(h.BusId);
                _tanPhi[i] = h.TanPhi;
            }
            _projector = new SetpointProjector(feeder, units, options: options);
            int buses = feeder.Network.BusCount;
            _input = new ProjectionInput(buses, units.Length);
            _result = _projector.CreateResult();
            _fixedKw = new double[buses];
            _fixedKvar = new double[buses];
            foreach (var (busId, kw, kvar) in fixedLoads)
            {
                int b = feeder.IndexOf(busId);
                _fixedKw[b] += kw;
                _fixedKvar[b] += kvar;
            }
            _seen = new bool[units.Length];
            _known = new bool[units.Length];
            _lastMaxKw = new double[units.Length];
            _lastBaseKw = new double[units.Length];
            _replies = new FinalSetpoint[units.Length];
            for (int i = 0; i < _replies.Length; i++)
            {
                _replies[i] = new FinalSetpoint();
            }
        }

        public void Begin()
        {
            _fixedKw.CopyTo(_input.BaseLoadKw, 0);
            _fixedKvar.CopyTo(_input.BaseLoadKvar, 0);
            Array.Clear(_seen);
        }

        public bool TryAdd(int household, HouseholdMessage message)
        {
            if (message.BodyCase != HouseholdMessage.BodyOneofCase.ProjectionInputs)
            {
                return false;
            }
            ProjectionInputs p = message.ProjectionInputs;
            if (!(double.IsFinite(p.ProposalKw) && double.IsFinite(p.FlexMinKw) && double.IsFinite(p.FlexMaxKw) && double.IsFinite(p.BaseKw)))
            {
                throw new ProtocolException($"projection inputs of household {household} are not finite");
            }
            if (!(p.FlexMinKw >= 0 && p.FlexMaxKw >= p.FlexMinKw))
            {
                throw new ProtocolException($"projection inputs of household {household}: box [{p.FlexMinKw}, {p.FlexMaxKw}] kW is not a box of non-negative power");
            }
            if (_seen[household])
            {
                throw new ProtocolException($"household {household} sent its projection inputs twice in one step");
            }
            _seen[household] = true;
            _input.MinKw[household] = p.FlexMinKw;
            _input.MaxKw[household] = p.FlexMaxKw;
            _input.ProposalKw[household] = Math.Clamp(p.ProposalKw, p.FlexMinKw, p.FlexMaxKw);
            _input.BaseLoadKw[_bus[household]] += p.BaseKw;
            _input.BaseLoadKvar[_bus[household]] += p.BaseKw * _tanPhi[household];
            _known[household] = true;
            _lastMaxKw[household] = p.FlexMaxKw;
            _lastBaseKw[household] = p.BaseKw;
            return true;
        }

        public bool SupportsDropouts => true;

        /// <summary>
        /// The dropped household as a fixed load: flexible power pinned to the desired (largest) power of its last report,
        /// base load as last reported (0 kW before any report). Conservative for feeder limits against load as long as
        /// its load does not rise above that report; see the coordinator's notes on dropouts.
        /// </summary>
        public void AddDropped(int household)
        {
            if (_seen[household])
            {
                throw new ProtocolException($"household {household} sent its projection inputs; it cannot also be stood in for");
            }
            _seen[household] = true;
            double flex = _known[household] ? _lastMaxKw[household] : 0, baseKw = _known[household] ? _lastBaseKw[household] : 0;
            _input.MinKw[household] = flex;
            _input.MaxKw[household] = flex;
            _input.ProposalKw[household] = flex;
            _input.BaseLoadKw[_bus[household]] += baseKw;
            _input.BaseLoadKvar[_bus[household]] += baseKw * _tanPhi[household];
        }

        public ProjectionResult Project()
        {
            foreach (bool s in _seen)
            {
                if (!s)
                {
                    throw new ProtocolException("projection needs every household's inputs");
                }
            }
            _projector.Project(_input, _result);
            return _result;
        }

        public void WriteReply(int household, int round, long step, CoordinatorMessage message)
        {
            FinalSetpoint r = _replies[household];
            r.Round = round;
            r.Step = step;
            r.SetpointKw = _result.SetpointKw[household];
            r.Outcome = Outcome(_result.Status);
            message.HouseholdIndex = household;
            message.Setpoint = r;
        }

        // The solver's warm start, then each household's last report (what a dropped household is stood in with).
        public void WriteState(BinaryWriter writer)
        {
            _projector.WriteState(writer);
            for (int h = 0; h < _known.Length; h++)
            {
                writer.Write(_known[h]);
                writer.Write(_lastMaxKw[h]);
                writer.Write(_lastBaseKw[h]);
            }
        }

        public void ReadState(BinaryReader reader)
        {
            _projector.ReadState(reader);
            for (int h = 0; h < _known.Length; h++)
            {
                _known[h] = reader.ReadBoolean();
                _lastMaxKw[h] = reader.ReadDouble();
                _lastBaseKw[h] = reader.ReadDouble();
                if (!(double.IsFinite(_lastMaxKw[h]) && double.IsFinite(_lastBaseKw[h])))
                {
                    throw new InvalidDataException($"projection state: household {h}'s last report is not finite");
                }
            }
        }
    }
}

/// <summary>The projection-input forms by name.</summary>
public static class ProjectionInputsForms
{
    /// <summary>Names of the forms.</summary>
    public static IReadOnlyList<string> Names { get; } = [HouseholdProjectionInputs.FormName, BusAggregateProjectionInputs.FormName];

    /// <summary>The form of a name.</summary>
    /// <param name="name">"household" or "bus-aggregate".</param>
    /// <returns>The form.</returns>
    /// <exception cref="ArgumentException">Unknown name.</exception>
    public static IProjectionInputsForm FromName(string name) => name switch
    {
        HouseholdProjectionInputs.FormName => new HouseholdProjectionInputs(),
        BusAggregateProjectionInputs.FormName => new BusAggregateProjectionInputs(),
        _ => throw new ArgumentException($"unknown projection-inputs form '{name}'; use {string.Join(" or ", Names)}", nameof(name)),
    };
}
