using FedGrid.Federation.Privacy;
using FedGrid.Federation.Wire;
using Grpc.Core;

namespace FedGrid.Hosting;

/// <summary>
/// Stateless checks of a household message before it reaches the coordinator's state machine: a body is set, vectors
/// have the run's lengths, every number is finite and of a sane magnitude. A failed check is an
/// <see cref="RpcException"/> with <see cref="StatusCode.InvalidArgument"/> and a message naming the field; the state
/// machine never sees the message, so the coordinator's state is unchanged.
/// </summary>
public sealed class MessageChecks
{
    /// <summary>Largest household message accepted, bytes (the gRPC receive limit of the coordinator).</summary>
    public const int MaxMessageBytes = 4 << 20;

    /// <summary>Largest magnitude of a partial sum or parameter: network pre-activations and weights far beyond it mean a broken or hostile sender (common practice for input sanity bounds).</summary>
    public const float MaxMagnitude = 1e6f;

    /// <summary>Largest magnitude of a power in kW (a home connection is tens of kW; 10 MW is absurd on a feeder lateral; common practice).</summary>
    public const double MaxKw = 1e4;

    private readonly int _actorSums, _criticSums, _households;

    /// <summary>Checks for a run whose first hidden layers have the given widths.</summary>
    /// <param name="actorSums">Actor H1 (floats of a partial sum).</param>
    /// <param name="criticSums">Critic H1.</param>
    /// <param name="households">Households on the roster (bounds the masked-sums key shares and recovery answers).</param>
    public MessageChecks(int actorSums, int criticSums, int households)
    {
        _actorSums = actorSums;
        _criticSums = criticSums;
        _households = households;
    }

    /// <summary>Throws <see cref="RpcException"/> (INVALID_ARGUMENT) when the message is malformed.</summary>
    /// <param name="message">The message.</param>
    public void Check(HouseholdMessage message)
    {
        ArgumentNullException.ThrowIfNull(message);
        switch (message.BodyCase)
        {
            case HouseholdMessage.BodyOneofCase.Join:
                if (string.IsNullOrEmpty(message.Join.HouseholdId) || message.Join.HouseholdId.Length > 64)
                {
                    throw Invalid("join.household_id must hold 1 to 64 characters");
                }
                if (!double.IsFinite(message.Join.TanPhi) || Math.Abs(message.Join.TanPhi) > 10)
                {
                    throw Invalid($"join.tan_phi {message.Join.TanPhi} is not a finite power-factor ratio");
                }
                break;
            case HouseholdMessage.BodyOneofCase.PartialSums:
                PartialSums s = message.PartialSums;
                Steps(s.Round, s.Step, "partial_sums");
                if (s.MaskedActor.Count > 0 || s.MaskedCritic.Count > 0)
                {
                    // Masked sums: ring elements (every 64-bit value is valid); the clear fields stay empty.
                    if (s.Actor.Count > 0 || s.Critic.Count > 0)
                    {
                        throw Invalid("partial_sums carries both clear and masked sums");
                    }
                    Length(s.MaskedActor.Count, _actorSums, "partial_sums.masked_actor", "values");
                    Length(s.MaskedCritic.Count, _criticSums, "partial_sums.masked_critic", "values");
                    break;
                }
                Vector(s.Actor, _actorSums, "partial_sums.actor");
                Vector(s.Critic, _criticSums, "partial_sums.critic");
                break;
            case HouseholdMessage.BodyOneofCase.MaskedKeys:
                Key(message.MaskedKeys.MaskKey, "masked_keys.mask_key");
                Key(message.MaskedKeys.ShareKey, "masked_keys.share_key");
                break;
            case HouseholdMessage.BodyOneofCase.KeyShares:
                CheckKeyShares(message.HouseholdIndex, message.KeyShares);
                break;
            case HouseholdMessage.BodyOneofCase.RecoveryShares:
                CheckRecoveryShares(message.RecoveryShares);
                break;
            case HouseholdMessage.BodyOneofCase.Rejoin:
                if (message.Rejoin.LastRound < 0)
                {
                    throw Invalid($"rejoin.last_round {message.Rejoin.LastRound} is negative");
                }
                break;
            case HouseholdMessage.BodyOneofCase.ProjectionInputs:
                ProjectionInputs p = message.ProjectionInputs;
                Steps(p.Round, p.Step, "projection_inputs");
                Kw(p.ProposalKw, "projection_inputs.proposal_kw");
                Kw(p.FlexMinKw, "projection_inputs.flex_min_kw");
                Kw(p.FlexMaxKw, "projection_inputs.flex_max_kw");
                Kw(p.BaseKw, "projection_inputs.base_kw");
                if (p.FlexMinKw > p.FlexMaxKw)
                {
                    throw Invalid($"projection_inputs: flex_min_kw {p.FlexMinKw} above flex_max_kw {p.FlexMaxKw}");
                }
                break;
            case HouseholdMessage.BodyOneofCase.Upload:
                ParameterUpload u = message.Upload;
                Steps(u.Round, 0, "upload");
                if (u.SampleCount < 0)
                {
                    throw Invalid($"upload.sample_count {u.SampleCount} is negative");
                }
                Values(u.ActorParameters, "upload.actor_parameters");
                Values(u.CriticParameters, "upload.critic_parameters");
                break;
            default:
                throw Invalid("household message without a body");
        }
    }

    /// <summary>A P-256 public key in SEC 1 uncompressed form: 65 bytes starting 0x04 (SEC 1 v2, section 2.3.3).</summary>
    private static void Key(Google.Protobuf.ByteString key, string field)
    {
        if (key.Length != MaskingKeyPair.PublicKeyBytes || key.Span[0] != 0x04)
        {
            throw Invalid($"{field} is {key.Length} bytes{(key.Length > 0 ? $" starting 0x{key.Span[0]:x2}" : "")}; a P-256 public key is {MaskingKeyPair.PublicKeyBytes} bytes starting 0x04");
        }
    }

    private void CheckKeyShares(int sender, KeyShares shares)
    {
        if (shares.Shares.Count > _households - 1)
        {
            throw Invalid($"key_shares holds {shares.Shares.Count} shares; a household sends at most {_households - 1} (one per peer)");
        }
        var seen = new bool[_households];
        for (int i = 0; i < shares.Shares.Count; i++)
        {
            EncryptedKeyShare e = shares.Shares[i];
            if (e.Owner != sender)
            {
                throw Invalid($"key_shares.shares[{i}].owner {e.Owner} is not the sender {sender}");
            }
            if (e.Holder < 0 || e.Holder >= _households || e.Holder == sender || seen[e.Holder])
            {
                throw Invalid($"key_shares.shares[{i}].holder {e.Holder} is not another household of 0..{_households - 1} named once");
            }
            seen[e.Holder] = true;
            if (e.Ciphertext.Length != KeyShareCipher.CiphertextBytes)
            {
                throw Invalid($"key_shares.shares[{i}].ciphertext is {e.Ciphertext.Length} bytes; {KeyShareCipher.CiphertextBytes} expected");
            }
        }
    }

    private void CheckRecoveryShares(RecoveryShares shares)
    {
        Steps(shares.Round, shares.Step, "recovery_shares");
        if (shares.Shares.Count > _households - 1)
        {
            throw Invalid($"recovery_shares holds {shares.Shares.Count} shares; at most {_households - 1} households can be recovered");
        }
        var seen = new bool[_households];
        for (int i = 0; i < shares.Shares.Count; i++)
        {
            RevealedShare r = shares.Shares[i];
            if (r.Owner < 0 || r.Owner >= _households || seen[r.Owner])
            {
                throw Invalid($"recovery_shares.shares[{i}].owner {r.Owner} is not a household of 0..{_households - 1} named once");
            }
            seen[r.Owner] = true;
            if (r.Value.Length != KeyShareCipher.ValueBytes)
            {
                throw Invalid($"recovery_shares.shares[{i}].value is {r.Value.Length} bytes; {KeyShareCipher.ValueBytes} expected");
            }
        }
    }

    private static void Length(int count, int length, string field, string what)
    {
        if (count != length)
        {
            throw Invalid($"{field} holds {count} {what}; the run's networks need {length}");
        }
    }

    private static void Steps(int round, long step, string what)
    {
        if (round < 0 || step < 0)
        {
            throw Invalid($"{what}: round {round} step {step} is negative");
        }
    }

    private static void Vector(Google.Protobuf.Collections.RepeatedField<float> values, int length, string field)
    {
        Length(values.Count, length, field, "floats");
        Values(values, field);
    }

    private static void Values(Google.Protobuf.Collections.RepeatedField<float> values, string field)
    {
        for (int i = 0; i < values.Count; i++)
        {
            float v = values[i];
            if (!float.IsFinite(v))
            {
                throw Invalid($"{field}[{i}] is {v}, not a finite number");
            }
            if (Math.Abs(v) > MaxMagnitude)
            {
                throw Invalid($"{field}[{i}] = {v} exceeds the magnitude limit {MaxMagnitude}");
            }
        }
    }

    private static void Kw(double v, string field)
    {
        if (!double.IsFinite(v) || Math.Abs(v) > MaxKw)
        {
            throw Invalid($"{field} = {v} kW is not finite or exceeds {MaxKw} kW");
        }
    }

    private static RpcException Invalid(string detail) => new(new Status(StatusCode.InvalidArgument, detail));
}
