namespace FedGrid.Federation.Protocol;

/// <summary>The length-prefixed vectors of the round-end checkpoints (coordinator and household snapshots).</summary>
public static class SnapshotIO
{
    /// <summary>Writes the length, then the values (little-endian).</summary>
    /// <param name="writer">Where to write.</param>
    /// <param name="values">The values.</param>
    public static void WriteFloats(BinaryWriter writer, ReadOnlySpan<float> values)
    {
        ArgumentNullException.ThrowIfNull(writer);
        writer.Write(values.Length);
        foreach (float v in values)
        {
            writer.Write(v);
        }
    }

    /// <summary>Reads a vector of <see cref="WriteFloats"/> into <paramref name="values"/>, which must have its length.</summary>
    /// <param name="reader">Where to read.</param>
    /// <param name="values">Receives the values.</param>
    /// <param name="what">What the vector is, for the error.</param>
    /// <exception cref="InvalidDataException">The lengths differ.</exception>
    public static void ReadFloats(BinaryReader reader, Span<float> values, string what)
    {
        ArgumentNullException.ThrowIfNull(reader);
        int n = reader.ReadInt32();
        if (n != values.Length)
        {
            throw new InvalidDataException($"snapshot {what} holds {n} values; {values.Length} expected");
        }
        for (int i = 0; i < n; i++)
        {
            values[i] = reader.ReadSingle();
        }
    }
}
