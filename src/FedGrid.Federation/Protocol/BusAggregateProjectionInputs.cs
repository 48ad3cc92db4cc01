using System.Security.Cryptography;
using System.Text;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Wire;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.Projection;
using FedGrid.Learning.Randomness;
using Google.Protobuf;

namespace FedGrid.Federation.Protocol;

/// <summary>
/// The <c>bus-aggregate</c> projection-input form (DESIGN.md §2, §4). Each household sends a <see cref="BusShares"/>
/// message: its proposal, flexible bounds, base load and base reactive load in fixed point
/// (<see cref="FixedPointEncoding"/>), with the pairwise masks (<see cref="PairwiseMasker"/>) it agreed with the other
/// households of its bus added; the masks cancel only in the bus sum, so the coordinator learns the bus totals and
/// nothing finer. It projects with one <see cref="FlexibleUnit"/> per bus (box = the bus's summed box) and returns one
/// <see cref="BusCorrection"/> per bus: a signed fraction f such that household m applies
/// <c>p_m + f·(p_m − min_m)</c> when f &lt; 0 and <c>p_m + f·(max_m − p_m)</c> when f &gt; 0 — inside its own box,
/// and summing over the bus exactly to the projected bus setpoint.
/// <para>
/// Key agreement: each household sends its P-256 public key with its join request; once every household has joined,
/// the coordinator relays to each the members and keys of its bus (<see cref="BusPeers"/>). In this simulation a
/// household's key pair is drawn from its seed, so a seed gives the same transcript; a deployment draws it with
/// <see cref="MaskingKeyPair.Generate"/>. A bus with one household has no one to mask with: its totals are that
/// household's values (the auditor measures exactly that).
/// </para>
/// <para>
/// Limits: the bus's flexible load is modelled at the largest tan φ of its households (the coordinator knows each
/// household's tan φ from its join request, but not how the bus's flexible power splits), so the reactive load the
/// projection assumes is an upper bound of the applied one. The projection objective is the squared distance of the bus
/// totals, not of each household's setpoint. Every household of a bus must send each step (no dropout recovery here;
/// the projection needs every household's inputs in both forms).
/// </para>
/// </summary>
public sealed class BusAggregateProjectionInputs : IProjectionInputsForm
{
    /// <summary>Form name.</summary>
    public const string FormName = "bus-aggregate";

    /// <summary>Values in one share: proposal, flexible minimum, desired, base kW, base kvar.</summary>
    public const int ValuesPerShare = 5;

    /// <summary>Mask channel of the shares (the masked-sums scheme's channels use other keys and other channels).</summary>
    public const long MaskChannel = 16;

    /// <summary>Default bound on one value of a share, kW (a household's load is far below it).</summary>
    public const double DefaultMaxAbsKw = 1.0e4;

    /// <summary>Creates the form.</summary>
    /// <param name="maxAbsKw">Bound on |value| of one share, kW (the fixed-point overflow bound is checked per bus).</param>
    /// <param name="fractionalBits">Fractional bits of the fixed-point encoding.</param>
    public BusAggregateProjectionInputs(double maxAbsKw = DefaultMaxAbsKw, int fractionalBits = FixedPointEncoding.DefaultFractionalBits)
    {
        _ = new FixedPointEncoding(maxAbsKw, 1, fractionalBits); // validates the pair
        MaxAbsKw = maxAbsKw;
        FractionalBits = fractionalBits;
    }

    /// <summary>Bound on one share value, kW.</summary>
    public double MaxAbsKw { get; }

    /// <summary>Fractional bits of the encoding.</summary>
    public int FractionalBits { get; }

    /// <inheritdoc />
    public string Name => FormName;

    /// <inheritdoc />
    public IHouseholdProjectionSide CreateHouseholdSide(ulong householdSeed) => new HouseholdSide(householdSeed);

    /// <inheritdoc />
    public ICoordinatorProjectionSide CreateCoordinatorSide(Feeder feeder, IReadOnlyList<RegisteredHousehold> households,
        IReadOnlyList<(string BusId, double Kw, double Kvar)> fixedLoads, ProjectionOptions? options) =>
        new CoordinatorSide(this, feeder, households, fixedLoads, options);

    /// <summary>The session identifier (HKDF salt) of a bus's key agreement.</summary>
    /// <param name="busId">Bus id.</param>
    /// <returns>32 bytes.</returns>
    public static byte[] SessionId(string busId) => SHA256.HashData(Encoding.UTF8.GetBytes("FedGrid bus-aggregate projection v1\0" + busId));

    /// <summary>The setpoint a household applies for a bus correction: moved from its proposal towards its minimum (f &lt; 0) or its desired power (f &gt; 0), inside its box.</summary>
    /// <param name="fraction">f in [−1, 1].</param>
    /// <param name="proposalKw">The household's proposal (inside its box).</param>
    /// <param name="flexMinKw">Its minimum.</param>
    /// <param name="flexMaxKw">Its desired power.</param>
    /// <returns>The setpoint.</returns>
    public static double ApplyCorrection(double fraction, double proposalKw, double flexMinKw, double flexMaxKw)
    {
        double p = Math.Clamp(proposalKw, flexMinKw, flexMaxKw);
        double s = fraction < 0 ? p + fraction * (p - flexMinKw) : p + fraction * (flexMaxKw - p);
        return Math.Clamp(s, flexMinKw, flexMaxKw);
    }

    /// <summary>The bus correction that takes a bus's proposal total to its projected total (the inverse of <see cref="ApplyCorrection"/> summed over the bus).</summary>
    /// <param name="projectedKw">Projected bus setpoint.</param>
    /// <param name="proposalKw">Bus proposal total.</param>
    /// <param name="minKw">Bus minimum total.</param>
    /// <param name="maxKw">Bus desired total.</param>
    /// <returns>f in [−1, 1].</returns>
    public static double Correction(double projectedKw, double proposalKw, double minKw, double maxKw)
    {
        double f = 0;
        if (projectedKw < proposalKw && proposalKw - minKw > 0)
        {
            f = (projectedKw - proposalKw) / (proposalKw - minKw);
        }
        else if (projectedKw > proposalKw && maxKw - proposalKw > 0)
        {
            f = (projectedKw - proposalKw) / (maxKw - proposalKw);
        }
        return Math.Clamp(f, -1, 1);
    }

    /// <summary>A household's masking key pair drawn from its seed (simulation only: reproducible transcripts).</summary>
    /// <param name="householdSeed">The seed.</param>
    /// <returns>The key pair.</returns>
    public static MaskingKeyPair SeededKeyPair(ulong householdSeed)
    {
        var random = new LearningRandom(LearningRandom.DeriveSeed(householdSeed, 0xB05A66UL));
        var scalar = new byte[MaskingKeyPair.PrivateScalarBytes];
        for (int attempt = 0; ; attempt++)
        {
            for (int i = 0; i < scalar.Length; i += 8)
            {
                BitConverter.TryWriteBytes(scalar.AsSpan(i), random.NextUInt64());
            }
            try
            {
                return MaskingKeyPair.FromPrivateScalar(scalar);
            }
            catch (CryptographicException) when (attempt < 16)
            {
                // d = 0 or d ≥ the group order (probability about 2^-32): draw again.
            }
            finally
            {
                CryptographicOperations.ZeroMemory(scalar);
            }
        }
    }

    private sealed class HouseholdSide : IHouseholdProjectionSide, IDisposable
    {
        private readonly MaskingKeyPair _keys;
        private readonly BusShares _shares = new();
        private readonly double[] _values = new double[ValuesPerShare];
        private readonly ulong[] _masked = new ulong[ValuesPerShare];
        private PairwiseMasker? _masker;
        private double _tanPhi, _proposal;

        public HouseholdSide(ulong seed)
        {
            _keys = SeededKeyPair(seed);
        }

        public void WriteJoin(JoinRequest join)
        {
            _tanPhi = join.TanPhi;
            join.ProjectionPublicKey = ByteString.CopyFrom(_keys.PublicKey);
        }

        public bool TryReadSetup(int ownIndex, CoordinatorMessage message)
        {
            if (message.BodyCase != CoordinatorMessage.BodyOneofCase.BusPeers)
            {
                return false;
            }
            if (_masker is not null)
            {
                throw new ProtocolException($"household {ownIndex} received its bus peers twice");
            }
            BusPeers peers = message.BusPeers;
            int position = peers.Members.IndexOf(ownIndex);
            if (position < 0 || peers.PublicKeys.Count != peers.Members.Count)
            {
                throw new ProtocolException($"bus peers of bus '{peers.BusId}' do not list household {ownIndex} with one key per member");
            }
            var keys = new byte[peers.PublicKeys.Count][];
            for (int i = 0; i < keys.Length; i++)
            {
                keys[i] = peers.PublicKeys[i].ToByteArray();
            }
            if (!CryptographicOperations.FixedTimeEquals(keys[position], _keys.PublicKey))
            {
                throw new ProtocolException($"bus peers of bus '{peers.BusId}' carry another key for household {ownIndex}");
            }
            var encoding = new FixedPointEncoding(peers.MaxAbsKw, Math.Max(1, keys.Length), peers.FractionalBits);
            _masker = new PairwiseMasker(position, _keys, keys, peers.SessionId.Span, encoding, ValuesPerShare);
            return true;
        }

        public void WriteInputs(int round, long step, double proposalKw, double flexMinKw, double flexMaxKw, double baseKw, HouseholdMessage message)
        {
            PairwiseMasker masker = _masker ?? throw new ProtocolException("bus-aggregate projection inputs before the bus peers arrived");
            _proposal = Math.Clamp(proposalKw, flexMinKw, flexMaxKw);
            _values[0] = _proposal;
            _values[1] = flexMinKw;
            _values[2] = flexMaxKw;
            _values[3] = baseKw;
            _values[4] = baseKw * _tanPhi;
            masker.Mask(new MaskContext(round, step, MaskChannel), _values, _masked);
            _shares.Round = round;
            _shares.Step = step;
            _shares.Masked.Clear();
            foreach (ulong v in _masked)
            {
                _shares.Masked.Add(v);
            }
            message.BusShares = _shares;
        }

        public bool TryReadSetpoint(CoordinatorMessage message, double flexMinKw, double flexMaxKw, out double setpointKw, out int round, out long step)
        {
            if (message.BodyCase != CoordinatorMessage.BodyOneofCase.BusCorrection)
            {
                setpointKw = 0;
                round = -1;
                step = -1;
                return false;
            }
            BusCorrection c = message.BusCorrection;
            if (!(c.Fraction >= -1 && c.Fraction <= 1))
            {
                throw new ProtocolException($"bus correction {c.Fraction} is outside [-1, 1]");
            }
            round = c.Round;
            step = c.Step;
            setpointKw = ApplyCorrection(c.Fraction, _proposal, flexMinKw, flexMaxKw);
            return true;
        }

        public void Dispose()
        {
            _masker?.Dispose();
            _keys.Dispose();
        }
    }

    private sealed class CoordinatorSide : ICoordinatorProjectionSide
    {
        private readonly SetpointProjector _projector;
        private readonly ProjectionInput _input;
        private readonly ProjectionResult _result;
        private readonly double[] _fixedKw, _fixedKvar, _fraction;
        private readonly int[] _unitOfHousehold, _busOfUnit;
        private readonly ulong[][] _sums;
        private readonly double[] _totals = new double[ValuesPerShare];
        private readonly FixedPointEncoding[] _encoding;
        private readonly BusPeers[] _peers;
        private readonly bool[] _seen;
        private readonly BusCorrection[] _replies;

        public CoordinatorSide(BusAggregateProjectionInputs form, Feeder feeder, IReadOnlyList<RegisteredHousehold> households,
            IReadOnlyList<(string BusId, double Kw, double Kvar)> fixedLoads, ProjectionOptions? options)
        {
            int n = households.Count;
            _unitOfHousehold = new int[n];
            var unitOfBus = new Dictionary<int, int>();
            var members = new List<List<RegisteredHousehold>>();
            for (int i = 0; i < n; i++)
            {
                RegisteredHousehold h = households[i];
                if (h.ProjectionPublicKey is not { Length: MaskingKeyPair.PublicKeyBytes })
                {
                    throw new ProtocolException($"household '{h.Id}' joined without a {MaskingKeyPair.PublicKeyBytes}-byte projection_public_key, which the '{FormName}' form needs");
                }
                int b = feeder.IndexOf(h.BusId);
                if (!unitOfBus.TryGetValue(b, out int u))
                {
                    u = members.Count;
                    unitOfBus[b] = u;
                    members.Add([]);
                }
                members[u].Add(h);
                _unitOfHousehold[i] = u;
            }
            int units = members.Count;
            var flexible = new FlexibleUnit[units];
            _busOfUnit = new int[units];
            _peers = new BusPeers[units];
            _encoding = new FixedPointEncoding[units];
            _sums = new ulong[units][];
            foreach (var (b, u) in unitOfBus)
            {
                List<RegisteredHousehold> list = members[u];
                string busId = list[0].BusId;
                flexible[u] = new FlexibleUnit("bus:" + busId, busId, list.Max(h => h.TanPhi));
                _busOfUnit[u] = b;
                _encoding[u] = new FixedPointEncoding(form.MaxAbsKw, list.Count, form.FractionalBits);
                _sums[u] = new ulong[ValuesPerShare];
                var peers = new BusPeers
                {
                    BusId = busId,
                    SessionId = ByteString.CopyFrom(SessionId(busId)),
                    FractionalBits = form.FractionalBits,
                    MaxAbsKw = form.MaxAbsKw,
                };
                foreach (RegisteredHousehold h in list)
                {
                    peers.Members.Add(h.Index);
                    peers.PublicKeys.Add(ByteString.CopyFrom(h.ProjectionPublicKey));
                }
                _peers[u] = peers;
            }
            _projector = new SetpointProjector(feeder, flexible, options: options);
            int buses = feeder.Network.BusCount;
            _input = new ProjectionInput(buses, units);
            _result = _projector.CreateResult();
            _fixedKw = new double[buses];
            _fixedKvar = new double[buses];
            foreach (var (busId, kw, kvar) in fixedLoads)
            {
                int b = feeder.IndexOf(busId);
                _fixedKw[b] += kw;
                _fixedKvar[b] += kvar;
            }
            _fraction = new double[units];
            _seen = new bool[n];
            _replies = new BusCorrection[n];
            for (int i = 0; i < n; i++)
            {
                _replies[i] = new BusCorrection();
            }
        }

        public bool TryWriteSetup(int household, CoordinatorMessage message)
        {
            message.HouseholdIndex = household;
            message.BusPeers = _peers[_unitOfHousehold[household]];
            return true;
        }

        public void Begin()
        {
            foreach (ulong[] s in _sums)
            {
                Array.Clear(s);
            }
            Array.Clear(_seen);
        }

        public bool TryAdd(int household, HouseholdMessage message)
        {
            if (message.BodyCase != HouseholdMessage.BodyOneofCase.BusShares)
            {
                return false;
            }
            if (message.BusShares.Masked.Count != ValuesPerShare)
            {
                throw new ProtocolException($"bus shares of household {household} hold {message.BusShares.Masked.Count} values; the form sends {ValuesPerShare}");
            }
            if (_seen[household])
            {
                throw new ProtocolException($"household {household} sent its bus shares twice in one step");
            }
            _seen[household] = true;
            ulong[] sum = _sums[_unitOfHousehold[household]];
            for (int i = 0; i < ValuesPerShare; i++)
            {
                sum[i] = unchecked(sum[i] + message.BusShares.Masked[i]);
            }
            return true;
        }

        public ProjectionResult Project()
        {
            foreach (bool s in _seen)
            {
                if (!s)
                {
                    throw new ProtocolException("projection needs every household's bus shares (the masks cancel only over the whole bus)");
                }
            }
            _fixedKw.CopyTo(_input.BaseLoadKw, 0);
            _fixedKvar.CopyTo(_input.BaseLoadKvar, 0);
            for (int u = 0; u < _sums.Length; u++)
            {
                _encoding[u].Decode(_sums[u], _totals);
                double proposal = _totals[0], min = _totals[1], max = _totals[2];
                double slack = _encoding[u].Resolution * _encoding[u].MaxParticipants;
                if (!(min >= -slack && max >= min - slack))
                {
                    throw new ProtocolException($"bus totals of {_peers[u].BusId}: box [{min}, {max}] kW is not a box of non-negative power");
                }
                min = Math.Max(0, min);
                max = Math.Max(min, max);
                _input.MinKw[u] = min;
                _input.MaxKw[u] = max;
                _input.ProposalKw[u] = Math.Clamp(proposal, min, max);
                int b = _busOfUnit[u];
                _input.BaseLoadKw[b] += _totals[3];
                _input.BaseLoadKvar[b] += _totals[4];
            }
            _projector.Project(_input, _result);
            for (int u = 0; u < _fraction.Length; u++)
            {
                _fraction[u] = Correction(_result.SetpointKw[u], _input.ProposalKw[u], _input.MinKw[u], _input.MaxKw[u]);
            }
            return _result;
        }

        public void WriteReply(int household, int round, long step, CoordinatorMessage message)
        {
            BusCorrection r = _replies[household];
            r.Round = round;
            r.Step = step;
            r.Fraction = _fraction[_unitOfHousehold[household]];
            r.Outcome = HouseholdProjectionInputs.Outcome(_result.Status);
            message.HouseholdIndex = household;
            message.BusCorrection = r;
        }
    }
}
