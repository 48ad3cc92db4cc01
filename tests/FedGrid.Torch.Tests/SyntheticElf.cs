using System.Text;

namespace FedGrid.Torch.Tests;

/// <summary>
/// Builds a minimal ELF64 little-endian file with the sections the patcher reads: .dynstr, .dynsym, .gnu.version,
/// .gnu.version_r (two Verneed entries, the second with two Vernaux) and optionally .gnu.version_d. Layout follows
/// the System V gABI and the LSB's symbol-versioning chapter: Elf64_Shdr 64 bytes, Elf64_Sym 24, Elf64_Verneed 16,
/// Elf64_Vernaux 16, Elf64_Verdef 20, Elf64_Verdaux 8 (from memory).
/// </summary>
internal static class SyntheticElf
{
    public const string Marker = "_ZSt21ios_base_library_initv";

    /// <summary>A "shim" needing GLIBCXX_3.4.30 (index 2) and GLIBCXX_3.4.32 (index 3) from libstdc++.so.6, GLIBC_2.2.5 (index 4) from libm.so.6.</summary>
    /// <param name="otherSymbolOn3432">Bind a second symbol to GLIBCXX_3.4.32 as well (the patcher must refuse).</param>
    /// <param name="weakAlready">Set VER_FLG_WEAK on the 3.4.32 entry from the start.</param>
    public static byte[] Shim(bool otherSymbolOn3432 = false, bool weakAlready = false) =>
        Build(otherSymbolOn3432, weakAlready, defines: null);

    /// <summary>A "system library" defining the given versions in .gnu.version_d.</summary>
    public static byte[] SystemLibrary(params string[] versions) => Build(false, false, versions);

    private static byte[] Build(bool otherSymbolOn3432, bool weakAlready, string[]? defines)
    {
        var strings = new MemoryStream();
        strings.WriteByte(0);
        var offsets = new Dictionary<string, uint>();
        uint Str(string s)
        {
            if (!offsets.TryGetValue(s, out uint o))
            {
                o = (uint)strings.Length;
                byte[] b = Encoding.ASCII.GetBytes(s);
                strings.Write(b);
                strings.WriteByte(0);
                offsets[s] = o;
            }
            return o;
        }

        // .dynsym: null, marker (v3), ios_base ctor (v2 or v3), cos (v4)
        var dynsym = new MemoryStream();
        void Sym(uint name) { W32(dynsym, name); dynsym.WriteByte(0x12); dynsym.WriteByte(0); W16(dynsym, 0); W64(dynsym, 0); W64(dynsym, 0); }
        Sym(0);
        Sym(Str(Marker));
        Sym(Str("_ZNSt8ios_baseC2Ev"));
        Sym(Str("cos"));
        var versym = new MemoryStream();
        W16(versym, 0); W16(versym, 3); W16(versym, (ushort)(otherSymbolOn3432 ? 3 : 2)); W16(versym, 4);

        // .gnu.version_r: libm.so.6 {GLIBC_2.2.5}, libstdc++.so.6 {GLIBCXX_3.4.30, GLIBCXX_3.4.32}
        var verneed = new MemoryStream();
        W16(verneed, 1); W16(verneed, 1); W32(verneed, Str("libm.so.6")); W32(verneed, 16); W32(verneed, 32);
        W32(verneed, 0x0d696915); W16(verneed, 0); W16(verneed, 4); W32(verneed, Str("GLIBC_2.2.5")); W32(verneed, 0);
        W16(verneed, 1); W16(verneed, 2); W32(verneed, Str("libstdc++.so.6")); W32(verneed, 16); W32(verneed, 0);
        W32(verneed, 0x08922970); W16(verneed, 0); W16(verneed, 2); W32(verneed, Str("GLIBCXX_3.4.30")); W32(verneed, 16);
        W32(verneed, 0x08922972); W16(verneed, (ushort)(weakAlready ? 2 : 0)); W16(verneed, 3); W32(verneed, Str("GLIBCXX_3.4.32")); W32(verneed, 0);

        MemoryStream? verdef = null;
        if (defines != null)
        {
            verdef = new MemoryStream();
            for (int i = 0; i < defines.Length; i++)
            {
                bool last = i == defines.Length - 1;
                W16(verdef, 1); W16(verdef, 0); W16(verdef, (ushort)(i + 2)); W16(verdef, 1); W32(verdef, 0);
                W32(verdef, 20); W32(verdef, last ? 0u : 28u);
                W32(verdef, Str(defines[i])); W32(verdef, 0);
            }
        }

        byte[][] bodies = verdef == null
            ? [strings.ToArray(), dynsym.ToArray(), versym.ToArray(), verneed.ToArray()]
            : [strings.ToArray(), dynsym.ToArray(), versym.ToArray(), verneed.ToArray(), verdef.ToArray()];
        uint[] types = [3, 11, 0x6fffffff, 0x6ffffffe, 0x6ffffffd];
        uint[] links = [0, 1, 2, 1, 1];
        uint[] infos = [0, 1, 0, 2, (uint)(defines?.Length ?? 0)];
        ulong[] entsizes = [0, 24, 2, 0, 0];

        var file = new MemoryStream();
        file.Write(new byte[64]);
        var sectionOffsets = new long[bodies.Length];
        for (int i = 0; i < bodies.Length; i++)
        {
            while (file.Length % 8 != 0)
            {
                file.WriteByte(0);
            }
            sectionOffsets[i] = file.Length;
            file.Write(bodies[i]);
        }
        while (file.Length % 8 != 0)
        {
            file.WriteByte(0);
        }
        long shoff = file.Length;
        file.Write(new byte[64]); // section 0: SHT_NULL
        for (int i = 0; i < bodies.Length; i++)
        {
            W32(file, 0); W32(file, types[i]); W64(file, 2); W64(file, 0);
            W64(file, (ulong)sectionOffsets[i]); W64(file, (ulong)bodies[i].Length);
            W32(file, links[i]); W32(file, infos[i]); W64(file, 8); W64(file, entsizes[i]);
        }
        byte[] elf = file.ToArray();
        byte[] ident = [0x7f, (byte)'E', (byte)'L', (byte)'F', 2, 1, 1, 0];
        ident.CopyTo(elf, 0);
        Put16(elf, 0x10, 3);     // ET_DYN
        Put16(elf, 0x12, 62);    // EM_X86_64
        Put32(elf, 0x14, 1);
        Put64(elf, 0x28, (ulong)shoff);
        Put16(elf, 0x34, 64);    // e_ehsize
        Put16(elf, 0x3A, 64);    // e_shentsize
        Put16(elf, 0x3C, (ushort)(bodies.Length + 1));
        Put16(elf, 0x3E, 0);
        return elf;
    }

    private static void W16(Stream s, ushort v) { s.WriteByte((byte)v); s.WriteByte((byte)(v >> 8)); }
    private static void W32(Stream s, uint v) { W16(s, (ushort)v); W16(s, (ushort)(v >> 16)); }
    private static void W64(Stream s, ulong v) { W32(s, (uint)v); W32(s, (uint)(v >> 32)); }
    private static void Put16(byte[] b, int o, ushort v) { b[o] = (byte)v; b[o + 1] = (byte)(v >> 8); }
    private static void Put32(byte[] b, int o, uint v) { Put16(b, o, (ushort)v); Put16(b, o + 2, (ushort)(v >> 16)); }
    private static void Put64(byte[] b, int o, ulong v) { Put32(b, o, (uint)v); Put32(b, o + 4, (uint)(v >> 32)); }
}
