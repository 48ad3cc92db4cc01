using FedGrid.Federation.Wire;
using Google.Protobuf;

namespace FedGrid.Federation.Transcripts;

/// <summary>What a transcript record is, by the message or event it holds.</summary>
public enum RecordKind
{
    /// <summary>Received <see cref="JoinRequest"/>.</summary>
    Join,
    /// <summary>Received <see cref="Wire.PartialSums"/>.</summary>
    PartialSums,
    /// <summary>Received <see cref="Wire.ProjectionInputs"/>.</summary>
    ProjectionInputs,
    /// <summary>Received <see cref="ParameterUpload"/>.</summary>
    Upload,
    /// <summary>Sent <see cref="JoinAccepted"/>.</summary>
    Accepted,
    /// <summary>Sent <see cref="ModelBroadcast"/>.</summary>
    Model,
    /// <summary>Sent <see cref="SumsReply"/>.</summary>
    Sums,
    /// <summary>Sent <see cref="FinalSetpoint"/>.</summary>
    Setpoint,
    /// <summary>Sent <see cref="TrainingCall"/>.</summary>
    Training,
    /// <summary>A <see cref="CoordinatorEvent"/>.</summary>
    Event,
    /// <summary>A received or sent message of a kind this reader does not know (newer writer).</summary>
    Unknown,
    /// <summary>Received <see cref="Wire.BusShares"/> (bus-aggregate projection inputs).</summary>
    BusShares,
    /// <summary>Sent <see cref="Wire.BusCorrection"/>.</summary>
    BusCorrection,
    /// <summary>Sent <see cref="Wire.BusPeers"/>.</summary>
    BusPeers,
    /// <summary>Received <see cref="RejoinRequest"/> (back after a step dropout).</summary>
    Rejoin,
    /// <summary>Masked sums: received <see cref="MaskedSumsPublicKeys"/> or sent <see cref="Wire.MaskedSumsKeys"/> (key directory).</summary>
    MaskedKeys,
    /// <summary>Masked sums: received <see cref="Wire.KeyShares"/> or sent (relayed) <see cref="EncryptedKeyShare"/>.</summary>
    KeyShares,
    /// <summary>Masked sums: sent <see cref="Wire.RecoveryRequest"/> or received <see cref="Wire.RecoveryShares"/>.</summary>
    Recovery,
}

/// <summary>Helpers on transcript records.</summary>
public static class TranscriptRecords
{
    /// <summary>The kind of a record.</summary>
    /// <param name="record">The record.</param>
    /// <returns>Its kind.</returns>
    public static RecordKind Kind(this TranscriptRecord record)
    {
        ArgumentNullException.ThrowIfNull(record);
        return record.EntryCase switch
        {
            TranscriptRecord.EntryOneofCase.Received => record.Received.BodyCase switch
            {
                HouseholdMessage.BodyOneofCase.Join => RecordKind.Join,
                HouseholdMessage.BodyOneofCase.PartialSums => RecordKind.PartialSums,
                HouseholdMessage.BodyOneofCase.ProjectionInputs => RecordKind.ProjectionInputs,
                HouseholdMessage.BodyOneofCase.Upload => RecordKind.Upload,
                HouseholdMessage.BodyOneofCase.BusShares => RecordKind.BusShares,
                HouseholdMessage.BodyOneofCase.Rejoin => RecordKind.Rejoin,
                HouseholdMessage.BodyOneofCase.MaskedKeys => RecordKind.MaskedKeys,
                HouseholdMessage.BodyOneofCase.KeyShares => RecordKind.KeyShares,
                HouseholdMessage.BodyOneofCase.RecoveryShares => RecordKind.Recovery,
                _ => RecordKind.Unknown,
            },
            TranscriptRecord.EntryOneofCase.Sent => record.Sent.BodyCase switch
            {
                CoordinatorMessage.BodyOneofCase.Accepted => RecordKind.Accepted,
                CoordinatorMessage.BodyOneofCase.Model => RecordKind.Model,
                CoordinatorMessage.BodyOneofCase.Sums => RecordKind.Sums,
                CoordinatorMessage.BodyOneofCase.Setpoint => RecordKind.Setpoint,
                CoordinatorMessage.BodyOneofCase.Training => RecordKind.Training,
                CoordinatorMessage.BodyOneofCase.BusCorrection => RecordKind.BusCorrection,
                CoordinatorMessage.BodyOneofCase.BusPeers => RecordKind.BusPeers,
                CoordinatorMessage.BodyOneofCase.MaskedKeys => RecordKind.MaskedKeys,
                CoordinatorMessage.BodyOneofCase.KeyShare => RecordKind.KeyShares,
                CoordinatorMessage.BodyOneofCase.RecoveryRequest => RecordKind.Recovery,
                _ => RecordKind.Unknown,
            },
            TranscriptRecord.EntryOneofCase.Event => RecordKind.Event,
            _ => RecordKind.Unknown,
        };
    }

    /// <summary>The household a record concerns: sender of a received message, recipient of a sent one (−1: all), −1 for events.</summary>
    /// <param name="record">The record.</param>
    /// <returns>The household index.</returns>
    public static int Household(this TranscriptRecord record)
    {
        ArgumentNullException.ThrowIfNull(record);
        return record.EntryCase switch
        {
            TranscriptRecord.EntryOneofCase.Received => record.Received.HouseholdIndex,
            TranscriptRecord.EntryOneofCase.Sent => record.Sent.HouseholdIndex,
            _ => -1,
        };
    }
}

/// <summary>The end of a transcript that stops inside a frame (e.g. after a crash).</summary>
/// <param name="Offset">Byte offset where the unreadable frame starts.</param>
/// <param name="Reason">What is wrong with it.</param>
/// <param name="RecordsBefore">Complete records before it.</param>
public sealed record TornTail(long Offset, string Reason, ulong RecordsBefore);

/// <summary>Thrown when a file is not a transcript at all (wrong magic, unreadable header).</summary>
public sealed class TranscriptFormatException : Exception
{
    /// <summary>Creates the exception.</summary>
    /// <param name="message">What is wrong, naming the file.</param>
    public TranscriptFormatException(string message) : base(message)
    {
    }
}

/// <summary>
/// Reads a transcript (<see cref="TranscriptFormat"/>) record by record without loading it whole. A frame cut short at the
/// end (crash while writing) ends the iteration and is reported in <see cref="Torn"/>; every record before it is
/// returned. Use <see cref="Records()"/>, or <see cref="Records(RecordKind[])"/> to iterate records of some kinds.
/// </summary>
public sealed class TranscriptReader : IDisposable
{
    private readonly Stream _stream;
    private readonly string _name;
    private byte[] _buffer = new byte[1 << 16];
    private bool _iterated;

    private TranscriptReader(Stream stream, string name)
    {
        _stream = stream;
        _name = name;
        Span<byte> magic = stackalloc byte[TranscriptFormat.Magic.Length];
        if (ReadFully(magic) != magic.Length || !magic.SequenceEqual(TranscriptFormat.Magic))
        {
            throw new TranscriptFormatException($"{name}: not a FedGrid transcript (the file does not start with FGTRANS1)");
        }
        var (status, frame, reason) = ReadFrame();
        if (status != FrameStatus.Ok)
        {
            throw new TranscriptFormatException($"{name}: the header frame is {(status == FrameStatus.End ? "missing" : "torn: " + reason)}");
        }
        try
        {
            Header = TranscriptHeader.Parser.ParseFrom(frame.Span);
        }
        catch (InvalidProtocolBufferException e)
        {
            throw new TranscriptFormatException($"{name}: the header frame does not parse: {e.Message}");
        }
        if (Header.FormatVersion != TranscriptFormat.Version)
        {
            throw new TranscriptFormatException($"{name}: transcript format version {Header.FormatVersion}; this reader reads {TranscriptFormat.Version}");
        }
    }

    /// <summary>Opens a transcript file and reads its header.</summary>
    /// <param name="path">The file.</param>
    /// <returns>The reader.</returns>
    /// <exception cref="TranscriptFormatException">Not a transcript.</exception>
    public static TranscriptReader Open(string path) =>
        new(new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.ReadWrite, 1 << 16), path);

    /// <summary>Reads a transcript from a stream (read from its current position).</summary>
    /// <param name="stream">The stream.</param>
    /// <param name="name">Name used in messages.</param>
    /// <returns>The reader.</returns>
    public static TranscriptReader FromStream(Stream stream, string name = "transcript") => new(stream, name);

    /// <summary>The header.</summary>
    public TranscriptHeader Header { get; }

    /// <summary>The torn last frame, once iteration reached it; null when the file ends on a frame boundary.</summary>
    public TornTail? Torn { get; private set; }

    /// <summary>Complete records read so far.</summary>
    public ulong RecordCount { get; private set; }

    /// <summary>Whether the last record read is the coordinator's run-completed event (the run ended normally).</summary>
    public bool Completed { get; private set; }

    /// <summary>Iterates every record in order (once per reader).</summary>
    /// <returns>The records.</returns>
    public IEnumerable<TranscriptRecord> Records()
    {
        if (_iterated)
        {
            throw new InvalidOperationException($"{_name}: records can be iterated once per reader; open it again");
        }
        _iterated = true;
        while (true)
        {
            long offset = _stream.CanSeek ? _stream.Position : -1;
            var (status, frame, reason) = ReadFrame();
            if (status == FrameStatus.End)
            {
                yield break;
            }
            if (status == FrameStatus.Torn)
            {
                Torn = new TornTail(offset, reason, RecordCount);
                yield break;
            }
            TranscriptRecord record;
            try
            {
                record = TranscriptRecord.Parser.ParseFrom(frame.Span);
            }
            catch (InvalidProtocolBufferException e)
            {
                Torn = new TornTail(offset, $"frame does not parse: {e.Message}", RecordCount);
                yield break;
            }
            if (record.Sequence != RecordCount)
            {
                Torn = new TornTail(offset, $"record sequence {record.Sequence} where {RecordCount} was expected", RecordCount);
                yield break;
            }
            RecordCount++;
            Completed = record.EntryCase == TranscriptRecord.EntryOneofCase.Event && record.Event.Kind == EventKind.RunCompleted;
            yield return record;
        }
    }

    /// <summary>Iterates the records of the given kinds, in order.</summary>
    /// <param name="kinds">Kinds to keep.</param>
    /// <returns>The records.</returns>
    public IEnumerable<TranscriptRecord> Records(params RecordKind[] kinds)
    {
        ArgumentNullException.ThrowIfNull(kinds);
        foreach (TranscriptRecord r in Records())
        {
            if (Array.IndexOf(kinds, r.Kind()) >= 0)
            {
                yield return r;
            }
        }
    }

    /// <summary>Closes the file.</summary>
    public void Dispose() => _stream.Dispose();

    private enum FrameStatus
    {
        Ok,
        End,
        Torn,
    }

    private (FrameStatus Status, ReadOnlyMemory<byte> Frame, string Reason) ReadFrame()
    {
        ulong length = 0;
        int shift = 0;
        for (int i = 0; ; i++)
        {
            int b = _stream.ReadByte();
            if (b < 0)
            {
                return i == 0 ? (FrameStatus.End, default, "") : (FrameStatus.Torn, default, "the file ends inside a frame's length");
            }
            if (i == 9 && b > 1)
            {
                return (FrameStatus.Torn, default, "frame length varint is malformed");
            }
            length |= (ulong)(b & 0x7F) << shift;
            shift += 7;
            if ((b & 0x80) == 0)
            {
                break;
            }
        }
        if (length > TranscriptFormat.MaxFrameBytes)
        {
            return (FrameStatus.Torn, default, $"frame length {length} exceeds the limit of {TranscriptFormat.MaxFrameBytes} bytes");
        }
        int n = (int)length;
        if (_buffer.Length < n)
        {
            _buffer = new byte[Math.Max(n, 2 * _buffer.Length)];
        }
        int got = ReadFully(_buffer.AsSpan(0, n));
        if (got < n)
        {
            return (FrameStatus.Torn, default, $"the file ends {n - got} bytes before the end of a {n}-byte frame");
        }
        return (FrameStatus.Ok, _buffer.AsMemory(0, n), "");
    }

    private int ReadFully(Span<byte> target)
    {
        int total = 0;
        while (total < target.Length)
        {
            int r = _stream.Read(target[total..]);
            if (r == 0)
            {
                break;
            }
            total += r;
        }
        return total;
    }
}
