using FedGrid.Federation.Wire;
using Google.Protobuf;

namespace FedGrid.Federation.Transcripts;

/// <summary>Where the coordinator records what it receives, sends and decides, in order.</summary>
public interface ITranscriptSink
{
    /// <summary>Records a message the coordinator received (before it is processed).</summary>
    /// <param name="round">Round.</param>
    /// <param name="step">Decision step, or −1.</param>
    /// <param name="message">The message (read during the call, not kept).</param>
    void Received(int round, long step, HouseholdMessage message);

    /// <summary>Records a message the coordinator sends (before it goes out).</summary>
    /// <param name="round">Round.</param>
    /// <param name="step">Decision step, or −1.</param>
    /// <param name="message">The message (read during the call, not kept).</param>
    void Sent(int round, long step, CoordinatorMessage message);

    /// <summary>Records a coordinator event.</summary>
    /// <param name="round">Round.</param>
    /// <param name="step">Decision step, or −1.</param>
    /// <param name="coordinatorEvent">The event.</param>
    void Event(int round, long step, CoordinatorEvent coordinatorEvent);

    /// <summary>Makes everything recorded so far durable (called at round ends).</summary>
    void Flush();
}

/// <summary>A sink that keeps nothing (runs without a transcript).</summary>
public sealed class NullTranscript : ITranscriptSink
{
    /// <summary>The shared instance.</summary>
    public static NullTranscript Instance { get; } = new();

    /// <inheritdoc />
    public void Received(int round, long step, HouseholdMessage message)
    {
    }

    /// <inheritdoc />
    public void Sent(int round, long step, CoordinatorMessage message)
    {
    }

    /// <inheritdoc />
    public void Event(int round, long step, CoordinatorEvent coordinatorEvent)
    {
    }

    /// <inheritdoc />
    public void Flush()
    {
    }
}

/// <summary>
/// The transcript file format, "FedGrid transcript" (<c>.fgt</c>): the 8 ASCII bytes <c>FGTRANS1</c>, then frames; each
/// frame is a base-128 varint byte count followed by that many bytes of one protobuf message. The first frame is a
/// <see cref="TranscriptHeader"/>, every later one a <see cref="TranscriptRecord"/> (proto/fedgrid/v1/transcript.proto).
/// </summary>
public static class TranscriptFormat
{
    /// <summary>The magic bytes at offset 0.</summary>
    public static ReadOnlySpan<byte> Magic => "FGTRANS1"u8;

    /// <summary>File extension, with the dot.</summary>
    public const string Extension = ".fgt";

    /// <summary>The format version in <see cref="TranscriptHeader.FormatVersion"/>.</summary>
    public const uint Version = 1;

    /// <summary>Largest frame a reader accepts (bytes); a larger count means a corrupt file.</summary>
    public const int MaxFrameBytes = 256 << 20;
}

/// <summary>
/// Streams a transcript to a file (or any stream): header first, then one frame per record, buffered, flushed at every
/// <see cref="Flush"/> (round ends). Records carry a gap-free sequence number.
/// </summary>
public sealed class TranscriptWriter : ITranscriptSink, IDisposable
{
    private readonly Stream _stream;
    private readonly CodedOutputStream _output;
    private readonly TranscriptRecord _record = new();
    private readonly bool _ownsStream;
    private bool _disposed;

    /// <summary>Starts a transcript on a stream and writes the magic and the header.</summary>
    /// <param name="stream">Writable stream.</param>
    /// <param name="header">The header.</param>
    /// <param name="ownsStream">Dispose the stream with the writer.</param>
    public TranscriptWriter(Stream stream, TranscriptHeader header, bool ownsStream = true)
    {
        ArgumentNullException.ThrowIfNull(stream);
        ArgumentNullException.ThrowIfNull(header);
        _stream = stream;
        _ownsStream = ownsStream;
        _stream.Write(TranscriptFormat.Magic);
        _output = new CodedOutputStream(stream, 1 << 16, leaveOpen: true);
        WriteFrame(header);
        BytesWritten += TranscriptFormat.Magic.Length;
        Flush();
    }

    private TranscriptWriter(FileStream stream, long bytes, ulong records)
    {
        _stream = stream;
        _ownsStream = true;
        _output = new CodedOutputStream(stream, 1 << 16, leaveOpen: true);
        BytesWritten = bytes;
        RecordCount = records;
    }

    /// <summary>
    /// Continues a transcript file from a checkpoint: cuts it back to <paramref name="bytes"/> (what was flushed at the
    /// checkpoint; records written after it are dropped, torn or whole) and appends from record <paramref name="records"/>.
    /// </summary>
    /// <param name="path">The transcript file.</param>
    /// <param name="bytes"><see cref="BytesWritten"/> at the checkpoint.</param>
    /// <param name="records"><see cref="RecordCount"/> at the checkpoint.</param>
    /// <returns>The writer, positioned at the end.</returns>
    /// <exception cref="InvalidDataException">The file is shorter than the checkpoint says.</exception>
    public static TranscriptWriter Append(string path, long bytes, ulong records)
    {
        var stream = new FileStream(path, FileMode.Open, FileAccess.Write, FileShare.Read, 1 << 16);
        if (stream.Length < bytes)
        {
            long length = stream.Length;
            stream.Dispose();
            throw new InvalidDataException($"{path}: transcript of {length} bytes; the checkpoint says {bytes} were written");
        }
        stream.SetLength(bytes);
        stream.Seek(bytes, SeekOrigin.Begin);
        return new TranscriptWriter(stream, bytes, records);
    }

    /// <summary>Flushes and asks the OS to put the file on disk (before a checkpoint names its length).</summary>
    public void FlushToDisk()
    {
        Flush();
        if (_stream is FileStream fs)
        {
            fs.Flush(flushToDisk: true);
        }
    }

    /// <summary>Creates (or overwrites) a transcript file.</summary>
    /// <param name="path">File path (conventionally ending in <see cref="TranscriptFormat.Extension"/>).</param>
    /// <param name="header">The header.</param>
    /// <returns>The writer.</returns>
    public static TranscriptWriter Create(string path, TranscriptHeader header) =>
        new(new FileStream(path, FileMode.Create, FileAccess.Write, FileShare.Read, 1 << 16), header);

    /// <summary>Records written so far (header excluded).</summary>
    public ulong RecordCount { get; private set; }

    /// <summary>Bytes written so far, magic and header included (flushed or not).</summary>
    public long BytesWritten { get; private set; }

    /// <inheritdoc />
    public void Received(int round, long step, HouseholdMessage message)
    {
        Prepare(round, step);
        _record.Received = message;
        Write();
    }

    /// <inheritdoc />
    public void Sent(int round, long step, CoordinatorMessage message)
    {
        Prepare(round, step);
        _record.Sent = message;
        Write();
    }

    /// <inheritdoc />
    public void Event(int round, long step, CoordinatorEvent coordinatorEvent)
    {
        Prepare(round, step);
        _record.Event = coordinatorEvent;
        Write();
    }

    /// <inheritdoc />
    public void Flush()
    {
        ObjectDisposedException.ThrowIf(_disposed, this);
        _output.Flush();
        _stream.Flush();
        if (_stream is FileStream fs)
        {
            fs.Flush(flushToDisk: false);
        }
    }

    /// <summary>Flushes and closes.</summary>
    public void Dispose()
    {
        if (_disposed)
        {
            return;
        }
        Flush();
        _output.Dispose();
        if (_ownsStream)
        {
            _stream.Dispose();
        }
        _disposed = true;
    }

    private void Prepare(int round, long step)
    {
        ObjectDisposedException.ThrowIf(_disposed, this);
        _record.Sequence = RecordCount;
        _record.Round = round;
        _record.Step = step;
    }

    private void WriteFrame(IMessage message)
    {
        int size = message.CalculateSize();
        _output.WriteLength(size);
        message.WriteTo(_output);
        BytesWritten += CodedOutputStream.ComputeLengthSize(size) + size;
    }

    private void Write()
    {
        WriteFrame(_record);
        _record.ClearEntry();
        RecordCount++;
    }
}
