using System.Diagnostics;
using FedGrid.Torch.Build;
using TorchSharp;

namespace FedGrid.Torch.Tests;

/// <summary>The build-time ELF fix (src/FedGrid.Torch/build/ElfVersionNeedPatcher.cs) on synthetic files and on the real output copy.</summary>
[System.Runtime.Versioning.SupportedOSPlatform("linux")]
public sealed class ElfPatcherTests
{
    private const string Lib = ElfVersionNeedPatcher.TorchSharpLibrary;
    private const string Ver = ElfVersionNeedPatcher.TorchSharpVersion;

    [Fact]
    public void WeakensOnlyTheNamedEntry()
    {
        byte[] original = SyntheticElf.Shim();
        byte[] elf = (byte[])original.Clone();
        Assert.Equal(ElfPatchOutcome.Patched, ElfVersionNeedPatcher.WeakenVersionNeed(elf, Lib, Ver, SyntheticElf.Marker));
        int changed = 0, at = -1;
        for (int i = 0; i < elf.Length; i++)
        {
            if (elf[i] != original[i])
            {
                changed++;
                at = i;
            }
        }
        Assert.Equal(1, changed); // one byte: vna_flags of that Vernaux, 0 -> VER_FLG_WEAK
        Assert.Equal(ElfVersionNeedPatcher.VerFlagWeak, elf[at]);
        Assert.Equal(ElfPatchOutcome.AlreadyWeak, ElfVersionNeedPatcher.WeakenVersionNeed(elf, Lib, Ver, SyntheticElf.Marker));
    }

    [Fact]
    public void ReadelfSeesTheWeakFlag()
    {
        // Outside check: GNU binutils' readelf (an independent ELF reader) reads the patched file.
        const string readelf = "/usr/bin/readelf";
        Assert.True(File.Exists(readelf), "binutils readelf is needed for this outside check (Debian package binutils)");
        byte[] elf = SyntheticElf.Shim();
        ElfVersionNeedPatcher.WeakenVersionNeed(elf, Lib, Ver, SyntheticElf.Marker);
        string path = Path.Combine(Path.GetTempPath(), $"fedgrid-elf-{Environment.ProcessId}.so");
        File.WriteAllBytes(path, elf);
        try
        {
            // Without program headers readelf shows string offsets instead of names; the entries are told apart by index.
            string text = Run(readelf, "-V -W " + path);
            Assert.Matches(@"Flags: WEAK\s+Version: 3", text);
            Assert.Matches(@"Flags: none\s+Version: 2", text);
            Assert.Matches(@"Flags: none\s+Version: 4", text);
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void PatchesACopyOfThePackagedShim()
    {
        // The real libLibTorchSharp.so from the package cache, copied to a temp folder (the cache is only read).
        var version = typeof(torch).Assembly.GetName().Version!;
        string root = typeof(ElfPatcherTests).Assembly.GetCustomAttributes(typeof(System.Reflection.AssemblyMetadataAttribute), false)
            .Cast<System.Reflection.AssemblyMetadataAttribute>().Single(a => a.Key == "NuGetPackageRoot").Value!;
        string packaged = Path.Combine(root, "torchsharp", $"{version.Major}.{version.Minor}.{version.Build}", "runtimes", "linux-x64", "native", "libLibTorchSharp.so");
        Assert.True(File.Exists(packaged), $"packaged shim not found at {packaged}");
        byte[] original = File.ReadAllBytes(packaged);
        byte[] elf = (byte[])original.Clone();
        Assert.Equal(ElfPatchOutcome.Patched, ElfVersionNeedPatcher.WeakenVersionNeed(elf, Lib, Ver, ElfVersionNeedPatcher.TorchSharpMarkerSymbol));
        Assert.Equal(1, original.Zip(elf).Count(p => p.First != p.Second));
        // Without the single-symbol guard's symbol the patch is refused (other symbols use other versions, none this one).
        Assert.Equal(ElfPatchOutcome.RefusedOtherSymbols, ElfVersionNeedPatcher.WeakenVersionNeed((byte[])original.Clone(), Lib, Ver, "_ZNSt8ios_baseC2Ev"));

        string path = Path.Combine(Path.GetTempPath(), $"fedgrid-shim-{Environment.ProcessId}.so");
        File.WriteAllBytes(path, elf);
        try
        {
            // Outside check: binutils readelf on the patched copy; only that entry is weak.
            string text = Run("/usr/bin/readelf", "-V -W " + path);
            Assert.Matches(@"Name: GLIBCXX_3\.4\.32\s+Flags: WEAK", text);
            Assert.Single(System.Text.RegularExpressions.Regex.Matches(text, "Flags: WEAK"));
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void RefusesWhenOtherSymbolsUseTheVersion()
    {
        byte[] elf = SyntheticElf.Shim(otherSymbolOn3432: true);
        byte[] copy = (byte[])elf.Clone();
        Assert.Equal(ElfPatchOutcome.RefusedOtherSymbols, ElfVersionNeedPatcher.WeakenVersionNeed(elf, Lib, Ver, SyntheticElf.Marker));
        Assert.Equal(copy, elf);
    }

    [Fact]
    public void ReportsMissingNeedAndNonElf()
    {
        byte[] elf = SyntheticElf.Shim();
        Assert.Equal(ElfPatchOutcome.NoSuchNeed, ElfVersionNeedPatcher.WeakenVersionNeed(elf, Lib, "GLIBCXX_9.9.9", null));
        Assert.Equal(ElfPatchOutcome.NoSuchNeed, ElfVersionNeedPatcher.WeakenVersionNeed(elf, "libfoo.so.1", Ver, null));
        Assert.Equal(ElfPatchOutcome.NotElf64, ElfVersionNeedPatcher.WeakenVersionNeed(new byte[100], Lib, Ver, null));
        byte[] truncated = elf.AsSpan(0, elf.Length - 40).ToArray();
        Assert.Equal(ElfPatchOutcome.NotElf64, ElfVersionNeedPatcher.WeakenVersionNeed(truncated, Lib, Ver, null));
    }

    [Fact]
    public void ReadsVersionDefinitions()
    {
        byte[] system = SyntheticElf.SystemLibrary("GLIBCXX_3.4", "GLIBCXX_3.4.29", "GLIBCXX_3.4.30");
        Assert.True(ElfVersionNeedPatcher.DefinesVersion(system, "GLIBCXX_3.4.30"));
        Assert.True(ElfVersionNeedPatcher.DefinesVersion(system, "GLIBCXX_3.4"));
        Assert.False(ElfVersionNeedPatcher.DefinesVersion(system, "GLIBCXX_3.4.32"));
    }

    [Fact]
    public void PatchesAFileOnlyWhenTheSystemLacksTheVersion()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-elf-").FullName;
        try
        {
            string shim = Path.Combine(dir, "libLibTorchSharp.so");
            string oldSystem = Path.Combine(dir, "old-libstdc++.so.6");
            string newSystem = Path.Combine(dir, "new-libstdc++.so.6");
            File.WriteAllBytes(oldSystem, SyntheticElf.SystemLibrary("GLIBCXX_3.4.29", "GLIBCXX_3.4.30"));
            File.WriteAllBytes(newSystem, SyntheticElf.SystemLibrary("GLIBCXX_3.4.30", "GLIBCXX_3.4.31", "GLIBCXX_3.4.32"));
            byte[] original = SyntheticElf.Shim();
            File.WriteAllBytes(shim, original);
            DateTime stamp = new(2024, 5, 1, 12, 0, 0, DateTimeKind.Utc);
            File.SetLastWriteTimeUtc(shim, stamp);
            const UnixFileMode mode = UnixFileMode.UserRead | UnixFileMode.UserWrite | UnixFileMode.UserExecute | UnixFileMode.GroupRead;
            File.SetUnixFileMode(shim, mode);

            // A hard link stands in for a package-cache file the copy might share storage with: it must stay intact.
            string cacheTwin = Path.Combine(dir, "cache-twin.so");
            bool linked = TryHardLink(shim, cacheTwin);

            Assert.Equal(ElfPatchOutcome.NoSuchNeed, ElfVersionNeedPatcher.PatchCopyIfNeeded(shim, newSystem, out _));
            Assert.Equal(original, File.ReadAllBytes(shim));

            Assert.Equal(ElfPatchOutcome.Patched, ElfVersionNeedPatcher.PatchCopyIfNeeded(shim, oldSystem, out string message));
            Assert.Contains("Patched", message);
            Assert.NotEqual(original, File.ReadAllBytes(shim));
            Assert.Equal(stamp, File.GetLastWriteTimeUtc(shim));
            Assert.Equal(mode, File.GetUnixFileMode(shim));
            if (linked)
            {
                Assert.Equal(original, File.ReadAllBytes(cacheTwin));
            }
            Assert.Equal(ElfPatchOutcome.AlreadyWeak, ElfVersionNeedPatcher.PatchCopyIfNeeded(shim, oldSystem, out _));
            Assert.False(File.Exists(shim + ".fedgrid-patch.tmp"));
        }
        finally
        {
            Directory.Delete(dir, recursive: true);
        }
    }

    [Fact]
    public void OutputCopyIsPatchedExactlyWhenTheSystemNeedsIt()
    {
        // The build ran the fix on this test project's output; TorchSharp must load here, and the copy's flag must
        // match what the system library needs.
        string? system = ElfVersionNeedPatcher.FindSystemLibStdCxx();
        Assert.NotNull(system);
        string shim = Path.Combine(AppContext.BaseDirectory, "runtimes", "linux-x64", "native", "libLibTorchSharp.so");
        Assert.True(File.Exists(shim), $"expected TorchSharp's native shim at {shim}");
        bool systemHasIt = ElfVersionNeedPatcher.DefinesVersion(File.ReadAllBytes(system!), Ver);
        byte[] bytes = File.ReadAllBytes(shim);
        ElfPatchOutcome state = ElfVersionNeedPatcher.WeakenVersionNeed(bytes, Lib, Ver, SyntheticElf.Marker);
        Assert.Equal(systemHasIt ? ElfPatchOutcome.Patched : ElfPatchOutcome.AlreadyWeak, state);

        using var t = torch.ones(3, 4).matmul(torch.ones(4, 2));
        Assert.Equal(4f, t[0, 0].item<float>());
    }

    private static bool TryHardLink(string target, string link)
    {
        try
        {
            Run("/bin/ln", $"{target} {link}");
            return File.Exists(link);
        }
        catch (Exception e) when (e is InvalidOperationException or System.ComponentModel.Win32Exception)
        {
            return false;
        }
    }

    private static string Run(string file, string arguments)
    {
        var psi = new ProcessStartInfo(file, arguments) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        using Process p = Process.Start(psi)!;
        string output = p.StandardOutput.ReadToEnd();
        p.WaitForExit();
        if (p.ExitCode != 0)
        {
            throw new InvalidOperationException($"{file} {arguments} failed: {p.StandardError.ReadToEnd()}");
        }
        return output;
    }
}
