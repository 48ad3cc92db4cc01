namespace FedGrid.Grid.Tests;

/// <summary>Finds files of the repository from the test output folder.</summary>
internal static class RepoPaths
{
    public static string Root { get; } = FindRoot();

    public static string Sample(string name) => Path.Combine(Root, "samples", "feeders", name);

    public static string ReferenceScript => Path.Combine(Root, "tests", "reference", "ac_power_flow.py");

    public static string Fixture(string name) => Path.Combine(AppContext.BaseDirectory, "Fixtures", name);

    private static string FindRoot()
    {
        for (var dir = new DirectoryInfo(AppContext.BaseDirectory); dir is not null; dir = dir.Parent)
            if (File.Exists(Path.Combine(dir.FullName, "FedGrid.sln")))
                return dir.FullName;
        throw new InvalidOperationException($"repository root (FedGrid.sln) not found above {AppContext.BaseDirectory}");
    }
}
