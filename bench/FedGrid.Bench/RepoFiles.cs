namespace FedGrid.Bench;

/// <summary>Finds files of the repository from wherever the benchmark runs (BenchmarkDotNet builds under bin/).</summary>
internal static class RepoFiles
{
    public static string Root { get; } = FindRoot();

    public static string BaranWu33 => Path.Combine(Root, "samples", "feeders", "baran-wu-33.json");

    public static string PowerFlowReferenceScript => Path.Combine(Root, "tests", "reference", "ac_power_flow.py");

    private static string FindRoot()
    {
        foreach (string start in new[] { AppContext.BaseDirectory, Environment.CurrentDirectory })
            for (var dir = new DirectoryInfo(start); dir is not null; dir = dir.Parent)
                if (File.Exists(Path.Combine(dir.FullName, "FedGrid.sln")))
                    return dir.FullName;
        throw new InvalidOperationException("repository root (FedGrid.sln) not found; run from inside the repository");
    }
}
