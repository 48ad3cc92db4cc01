// Build-time fix for TorchSharp's native shim on systems with an older libstdc++ (e.g. Debian 12).
//
// libLibTorchSharp.so (TorchSharp 0.107.0) carries a version need GLIBCXX_3.4.32 on libstdc++.so.6. That need
// exists only for the link-marker symbol std::ios_base_library_init(), which the library never calls. On a system
// whose libstdc++ defines at most GLIBCXX_3.4.30 the dynamic loader refuses the library. Marking that one Vernaux
// entry weak (VER_FLG_WEAK) turns the hard requirement into a check the loader reports but does not enforce.
//
// This file is compiled twice: by MSBuild's RoslynCodeTaskFactory as the task behind FedGrid.Torch.targets, and into
// the tests with FEDGRID_ELF_PATCHER_NO_TASK defined (no MSBuild dependency). It therefore sticks to netstandard2.0
// APIs and plain C#. It parses ELF64 little-endian files through their section headers.
#nullable enable
using System;
using System.Collections.Generic;
using System.IO;
using System.Runtime.InteropServices;
using System.Text;

namespace FedGrid.Torch.Build
{
    /// <summary>What <see cref="ElfVersionNeedPatcher.WeakenVersionNeed"/> found or did.</summary>
    public enum ElfPatchOutcome
    {
        /// <summary>Not an ELF64 little-endian file, or its section headers are inconsistent.</summary>
        NotElf64,

        /// <summary>The file has no version need for that library and version; nothing to do.</summary>
        NoSuchNeed,

        /// <summary>The entry is already weak; nothing to do.</summary>
        AlreadyWeak,

        /// <summary>The entry was marked weak.</summary>
        Patched,

        /// <summary>Other symbols than the allowed one depend on that version; left alone.</summary>
        RefusedOtherSymbols,
    }

    /// <summary>Reads ELF64 version definitions and weakens one version need (see the file header).</summary>
    public static class ElfVersionNeedPatcher
    {
        /// <summary>The version need TorchSharp 0.107.0 declares and Debian 12's libstdc++ lacks.</summary>
        public const string TorchSharpLibrary = "libstdc++.so.6";

        /// <summary>The version name.</summary>
        public const string TorchSharpVersion = "GLIBCXX_3.4.32";

        /// <summary>The only symbol allowed to depend on it: std::ios_base_library_init(), a link marker.</summary>
        public const string TorchSharpMarkerSymbol = "_ZSt21ios_base_library_initv";

        /// <summary>VER_FLG_WEAK in vna_flags.</summary>
        public const ushort VerFlagWeak = 0x2;

        private const uint ShtDynsym = 11;
        private const uint ShtGnuVerdef = 0x6ffffffd;
        private const uint ShtGnuVerneed = 0x6ffffffe;
        private const uint ShtGnuVersym = 0x6fffffff;

        private sealed class Section
        {
            public uint Type;
            public long Offset;
            public long Size;
            public int Link;
            public int Info;
            public long EntrySize;
        }

        /// <summary>True when the ELF file defines the symbol version <paramref name="version"/> (its .gnu.version_d).</summary>
        /// <param name="elf">File bytes.</param>
        /// <param name="version">Version name, e.g. GLIBCXX_3.4.32.</param>
        /// <returns>Whether the version is defined.</returns>
        public static bool DefinesVersion(byte[] elf, string version)
        {
            List<Section>? sections = ReadSections(elf);
            if (sections == null)
            {
                return false;
            }
            foreach (Section s in sections)
            {
                if (s.Type != ShtGnuVerdef)
                {
                    continue;
                }
                Section strtab = sections[s.Link];
                long entry = s.Offset;
                for (int n = 0; n < s.Info; n++)
                {
                    Require(elf, entry, 20);
                    ushort count = U16(elf, entry + 6);
                    uint aux = U32(elf, entry + 12);
                    uint next = U32(elf, entry + 16);
                    long auxAt = entry + aux;
                    for (int a = 0; a < count; a++)
                    {
                        Require(elf, auxAt, 8);
                        if (ReadString(elf, strtab, U32(elf, auxAt)) == version)
                        {
                            return true;
                        }
                        uint auxNext = U32(elf, auxAt + 4);
                        if (auxNext == 0)
                        {
                            break;
                        }
                        auxAt += auxNext;
                    }
                    if (next == 0)
                    {
                        break;
                    }
                    entry += next;
                }
            }
            return false;
        }

        /// <summary>
        /// Marks the Vernaux entry (file <paramref name="library"/>, version <paramref name="version"/>) of .gnu.version_r
        /// weak, in <paramref name="elf"/> in place, provided no dynamic symbol other than <paramref name="onlySymbol"/>
        /// is bound to that version (null: no such check).
        /// </summary>
        /// <param name="elf">File bytes, changed in place when patched.</param>
        /// <param name="library">Needed file name, e.g. libstdc++.so.6.</param>
        /// <param name="version">Version name.</param>
        /// <param name="onlySymbol">The single symbol allowed to use that version, or null.</param>
        /// <returns>What was found or done.</returns>
        public static ElfPatchOutcome WeakenVersionNeed(byte[] elf, string library, string version, string? onlySymbol)
        {
            List<Section>? sections;
            try
            {
                sections = ReadSections(elf);
            }
            catch (InvalidDataException)
            {
                return ElfPatchOutcome.NotElf64;
            }
            if (sections == null)
            {
                return ElfPatchOutcome.NotElf64;
            }
            try
            {
                foreach (Section s in sections)
                {
                    if (s.Type != ShtGnuVerneed)
                    {
                        continue;
                    }
                    Section strtab = sections[s.Link];
                    long entry = s.Offset;
                    for (int n = 0; n < s.Info; n++)
                    {
                        Require(elf, entry, 16);
                        ushort count = U16(elf, entry + 2);
                        string file = ReadString(elf, strtab, U32(elf, entry + 4));
                        uint aux = U32(elf, entry + 8);
                        uint next = U32(elf, entry + 12);
                        if (file == library)
                        {
                            long auxAt = entry + aux;
                            for (int a = 0; a < count; a++)
                            {
                                Require(elf, auxAt, 16);
                                ushort flags = U16(elf, auxAt + 4);
                                ushort index = U16(elf, auxAt + 6);
                                if (ReadString(elf, strtab, U32(elf, auxAt + 8)) == version)
                                {
                                    if ((flags & VerFlagWeak) != 0)
                                    {
                                        return ElfPatchOutcome.AlreadyWeak;
                                    }
                                    if (onlySymbol != null && !OnlySymbolUsesVersion(elf, sections, index, onlySymbol))
                                    {
                                        return ElfPatchOutcome.RefusedOtherSymbols;
                                    }
                                    W16(elf, auxAt + 4, (ushort)(flags | VerFlagWeak));
                                    return ElfPatchOutcome.Patched;
                                }
                                uint auxNext = U32(elf, auxAt + 12);
                                if (auxNext == 0)
                                {
                                    break;
                                }
                                auxAt += auxNext;
                            }
                        }
                        if (next == 0)
                        {
                            break;
                        }
                        entry += next;
                    }
                }
            }
            catch (InvalidDataException)
            {
                return ElfPatchOutcome.NotElf64;
            }
            return ElfPatchOutcome.NoSuchNeed;
        }

        /// <summary>The system's libstdc++.so.6 in the usual Linux library folders, or null (not Linux, or none found).</summary>
        /// <returns>A path or null.</returns>
        public static string? FindSystemLibStdCxx()
        {
            if (!RuntimeInformation.IsOSPlatform(OSPlatform.Linux))
            {
                return null;
            }
            string[] folders =
            {
                "/usr/lib/x86_64-linux-gnu", "/lib/x86_64-linux-gnu", "/usr/lib/aarch64-linux-gnu", "/lib/aarch64-linux-gnu",
                "/usr/lib64", "/lib64", "/usr/lib", "/lib",
            };
            foreach (string folder in folders)
            {
                string path = Path.Combine(folder, TorchSharpLibrary);
                if (File.Exists(path))
                {
                    return path;
                }
            }
            return null;
        }

        /// <summary>
        /// Patches one copy of libLibTorchSharp.so when the system library lacks the version: reads the file, weakens the
        /// entry in memory, writes a new file beside it and replaces the original by it (so a hard link to the package
        /// cache is never written through), keeping the original modification time. Idempotent.
        /// </summary>
        /// <param name="path">The copy in an output folder.</param>
        /// <param name="systemLibrary">The system libstdc++ to check, or null to look in the usual folders.</param>
        /// <param name="message">What happened, for the build log.</param>
        /// <returns>The outcome; NoSuchNeed also when the system has the version (nothing to do).</returns>
        public static ElfPatchOutcome PatchCopyIfNeeded(string path, string? systemLibrary, out string message)
        {
            string? system = systemLibrary ?? FindSystemLibStdCxx();
            if (system == null || !File.Exists(system))
            {
                message = "no system " + TorchSharpLibrary + " found; " + path + " left as is";
                return ElfPatchOutcome.NoSuchNeed;
            }
            if (DefinesVersion(File.ReadAllBytes(system), TorchSharpVersion))
            {
                message = system + " defines " + TorchSharpVersion + "; " + path + " left as is";
                return ElfPatchOutcome.NoSuchNeed;
            }
            byte[] bytes = File.ReadAllBytes(path);
            ElfPatchOutcome outcome = WeakenVersionNeed(bytes, TorchSharpLibrary, TorchSharpVersion, TorchSharpMarkerSymbol);
            if (outcome == ElfPatchOutcome.Patched)
            {
                DateTime modified = File.GetLastWriteTimeUtc(path);
                string temporary = path + ".fedgrid-patch.tmp";
                File.Copy(path, temporary, true); // a separate file with the copy's permissions
                File.WriteAllBytes(temporary, bytes);
                File.Delete(path);
                File.Move(temporary, path);
                File.SetLastWriteTimeUtc(path, modified);
            }
            message = path + ": " + outcome + " (" + TorchSharpVersion + " on " + TorchSharpLibrary + "; " + system + " lacks it)";
            return outcome;
        }

        private static bool OnlySymbolUsesVersion(byte[] elf, List<Section> sections, ushort versionIndex, string onlySymbol)
        {
            Section? versym = null, dynsym = null;
            foreach (Section s in sections)
            {
                if (s.Type == ShtGnuVersym)
                {
                    versym = s;
                }
                else if (s.Type == ShtDynsym)
                {
                    dynsym = s;
                }
            }
            if (versym == null || dynsym == null || dynsym.EntrySize < 24)
            {
                return false;
            }
            Section strtab = sections[dynsym.Link];
            long symbols = dynsym.Size / dynsym.EntrySize;
            bool found = false;
            for (long i = 0; i < symbols && 2 * i + 2 <= versym.Size; i++)
            {
                ushort v = (ushort)(U16(elf, versym.Offset + 2 * i) & 0x7fff);
                if (v != versionIndex)
                {
                    continue;
                }
                long sym = dynsym.Offset + i * dynsym.EntrySize;
                Require(elf, sym, 24);
                if (ReadString(elf, strtab, U32(elf, sym)) != onlySymbol)
                {
                    return false;
                }
                found = true;
            }
            return found;
        }

        private static List<Section>? ReadSections(byte[] elf)
        {
            if (elf.Length < 64 || elf[0] != 0x7f || elf[1] != (byte)'E' || elf[2] != (byte)'L' || elf[3] != (byte)'F')
            {
                return null;
            }
            if (elf[4] != 2 || elf[5] != 1)
            {
                return null; // ELFCLASS64 and ELFDATA2LSB only
            }
            long shoff = (long)U64(elf, 0x28);
            ushort shentsize = U16(elf, 0x3A);
            ushort shnum = U16(elf, 0x3C);
            if (shoff <= 0 || shentsize < 64 || shnum == 0)
            {
                return null;
            }
            Require(elf, shoff, (long)shentsize * shnum);
            var list = new List<Section>(shnum);
            for (int i = 0; i < shnum; i++)
            {
                long h = shoff + (long)i * shentsize;
                var s = new Section
                {
                    Type = U32(elf, h + 4),
                    Offset = (long)U64(elf, h + 24),
                    Size = (long)U64(elf, h + 32),
                    Link = (int)U32(elf, h + 40),
                    Info = (int)U32(elf, h + 44),
                    EntrySize = (long)U64(elf, h + 56),
                };
                list.Add(s);
            }
            foreach (Section s in list)
            {
                if (s.Type == ShtGnuVerdef || s.Type == ShtGnuVerneed || s.Type == ShtGnuVersym || s.Type == ShtDynsym)
                {
                    Require(elf, s.Offset, s.Size);
                    if (s.Type != ShtGnuVersym && (s.Link <= 0 || s.Link >= list.Count))
                    {
                        throw new InvalidDataException("Section link out of range.");
                    }
                }
            }
            return list;
        }

        private static string ReadString(byte[] elf, Section strtab, uint offset)
        {
            long start = strtab.Offset + offset;
            long end = start;
            long limit = strtab.Offset + strtab.Size;
            if (start < strtab.Offset || start >= limit || limit > elf.Length)
            {
                throw new InvalidDataException("String offset outside its table.");
            }
            while (end < limit && elf[end] != 0)
            {
                end++;
            }
            return Encoding.ASCII.GetString(elf, (int)start, (int)(end - start));
        }

        private static void Require(byte[] elf, long offset, long length)
        {
            if (offset < 0 || length < 0 || offset + length > elf.Length)
            {
                throw new InvalidDataException("ELF structure points outside the file.");
            }
        }

        private static ushort U16(byte[] b, long o) { Require(b, o, 2); return (ushort)(b[o] | (b[o + 1] << 8)); }

        private static uint U32(byte[] b, long o) { Require(b, o, 4); return (uint)(b[o] | (b[o + 1] << 8) | (b[o + 2] << 16) | (b[o + 3] << 24)); }

        private static ulong U64(byte[] b, long o) => U32(b, o) | ((ulong)U32(b, o + 4) << 32);

        private static void W16(byte[] b, long o, ushort v) { b[o] = (byte)v; b[o + 1] = (byte)(v >> 8); }
    }

#if !FEDGRID_ELF_PATCHER_NO_TASK
    /// <summary>MSBuild task: applies <see cref="ElfVersionNeedPatcher.PatchCopyIfNeeded"/> to each given file.</summary>
    public sealed class FedGridWeakenTorchSharpVersionNeed : Microsoft.Build.Utilities.Task
    {
        /// <summary>Copies of libLibTorchSharp.so in output folders.</summary>
        [Microsoft.Build.Framework.Required]
        public Microsoft.Build.Framework.ITaskItem[] Files { get; set; } = Array.Empty<Microsoft.Build.Framework.ITaskItem>();

        /// <summary>System libstdc++ to check instead of the usual folders (optional).</summary>
        public string? SystemLibrary { get; set; }

        /// <summary>Runs the task.</summary>
        /// <returns>False when a file could not be processed.</returns>
        public override bool Execute()
        {
            foreach (Microsoft.Build.Framework.ITaskItem item in Files)
            {
                string path = item.GetMetadata("FullPath");
                try
                {
                    string? system = string.IsNullOrEmpty(SystemLibrary) ? null : SystemLibrary;
                    ElfPatchOutcome outcome = ElfVersionNeedPatcher.PatchCopyIfNeeded(path, system, out string message);
                    Log.LogMessage(outcome == ElfPatchOutcome.Patched ? Microsoft.Build.Framework.MessageImportance.High : Microsoft.Build.Framework.MessageImportance.Low,
                        "FedGrid.Torch: " + message);
                    if (outcome == ElfPatchOutcome.RefusedOtherSymbols)
                    {
                        Log.LogWarning("FedGrid.Torch: " + path + " needs " + ElfVersionNeedPatcher.TorchSharpVersion
                            + " for more than the link marker; not patched, TorchSharp may fail to load on this system.");
                    }
                }
                catch (IOException e)
                {
                    Log.LogError("FedGrid.Torch: could not patch " + path + ": " + e.Message);
                    return false;
                }
                catch (UnauthorizedAccessException e)
                {
                    Log.LogError("FedGrid.Torch: could not patch " + path + ": " + e.Message);
                    return false;
                }
            }
            return !Log.HasLoggedErrors;
        }
    }
#endif
}
