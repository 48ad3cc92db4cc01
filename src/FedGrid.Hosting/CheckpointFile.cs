using System.Security.Cryptography;

namespace FedGrid.Hosting;

/// <summary>
/// The checkpoint files of the hosts (coordinator and household): a magic, the run's settings (a checkpoint of another
/// run is refused), the body, and a SHA-256 of everything before it (a torn or damaged file is refused). Written
/// atomically: a temporary file beside the target, flushed to disk, then renamed over it, so a reader finds either the
/// previous checkpoint or the new one, never a mix.
/// </summary>
public static class CheckpointFile
{
    private static ReadOnlySpan<byte> Magic => "FGCKPT02"u8;

    /// <summary>Writes a checkpoint atomically.</summary>
    /// <param name="path">Target file.</param>
    /// <param name="run">The run it belongs to.</param>
    /// <param name="kind">What it holds ("coordinator", or a household id).</param>
    /// <param name="body">Writes the body.</param>
    public static void Write(string path, HostedRunSettings run, string kind, Action<BinaryWriter> body)
    {
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(body);
        using var buffer = new MemoryStream();
        using (var w = new BinaryWriter(buffer, System.Text.Encoding.UTF8, leaveOpen: true))
        {
            w.Write(Magic);
            WriteRun(w, run);
            w.Write(kind);
            body(w);
        }
        byte[] hash = SHA256.HashData(buffer.GetBuffer().AsSpan(0, (int)buffer.Length));
        string tmp = path + ".tmp";
        using (var f = new FileStream(tmp, FileMode.Create, FileAccess.Write, FileShare.None))
        {
            f.Write(buffer.GetBuffer(), 0, (int)buffer.Length);
            f.Write(hash);
            f.Flush(flushToDisk: true);
        }
        File.Move(tmp, path, overwrite: true);
    }

    /// <summary>Reads a checkpoint of <see cref="Write"/>.</summary>
    /// <typeparam name="T">What the body gives.</typeparam>
    /// <param name="path">The file.</param>
    /// <param name="run">The run it must belong to.</param>
    /// <param name="kind">What it must hold.</param>
    /// <param name="body">Reads the body.</param>
    /// <returns>The body's value.</returns>
    /// <exception cref="InvalidDataException">Damaged, of another run or kind, or unreadable; the message names the file and the field.</exception>
    public static T Read<T>(string path, HostedRunSettings run, string kind, Func<BinaryReader, T> body)
    {
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(body);
        byte[] bytes = File.ReadAllBytes(path);
        if (bytes.Length < Magic.Length + 32 || !bytes.AsSpan(0, Magic.Length).SequenceEqual(Magic))
        {
            throw new InvalidDataException($"{path}: not a FedGrid checkpoint (magic)");
        }
        int content = bytes.Length - 32;
        if (!SHA256.HashData(bytes.AsSpan(0, content)).AsSpan().SequenceEqual(bytes.AsSpan(content)))
        {
            throw new InvalidDataException($"{path}: checkpoint damaged (SHA-256 of its content does not match)");
        }
        using var r = new BinaryReader(new MemoryStream(bytes, Magic.Length, content - Magic.Length));
        try
        {
            var saved = new HostedRunSettings(r.ReadUInt64(), r.ReadInt32(), r.ReadInt32(), r.ReadInt32(), r.ReadString());
            if (saved != run)
            {
                throw new InvalidDataException($"{path}: checkpoint of run {saved}; this process runs {run}");
            }
            string savedKind = r.ReadString();
            if (savedKind != kind)
            {
                throw new InvalidDataException($"{path}: checkpoint of '{savedKind}'; '{kind}' expected");
            }
            return body(r);
        }
        catch (EndOfStreamException)
        {
            throw new InvalidDataException($"{path}: checkpoint ends early");
        }
        catch (InvalidDataException e) when (!e.Message.StartsWith(path, StringComparison.Ordinal))
        {
            throw new InvalidDataException($"{path}: {e.Message}", e);
        }
    }

    private static void WriteRun(BinaryWriter w, HostedRunSettings run)
    {
        w.Write(run.Seed);
        w.Write(run.Days);
        w.Write(run.Households);
        w.Write(run.StepsPerRound);
        w.Write(run.Scheme);
    }
}
