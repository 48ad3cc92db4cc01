using FedGrid.Grid.Feeders;

namespace FedGrid.TestSupport;

/// <summary>
/// Feeders for the projection tests and benchmarks, built in code from the Baran &amp; Wu (1989)
/// 33-bus sample (samples/feeders/baran-wu-33.json, with its common-practice limits: 400 A,
/// 0.95–1.05 pu, 5000 kW import). Larger feeders join copies of it at the substation bus.
/// </summary>
internal static class TestFeeders
{
    /// <summary>Path of a file given relative to the repository root, found by walking up from the running assembly.</summary>
    public static string RepoFile(string relative)
    {
        foreach (string start in new[] { AppContext.BaseDirectory, Environment.CurrentDirectory })
            for (var dir = new DirectoryInfo(start); dir is not null; dir = dir.Parent)
            {
                string candidate = Path.Combine(dir.FullName, relative);
                if (File.Exists(candidate)) return candidate;
            }
        throw new FileNotFoundException($"{relative} not found above {AppContext.BaseDirectory}");
    }

    /// <summary>The published sample feeder file.</summary>
    public static Feeder BaranWuSample() => FeederFile.Load(RepoFile(Path.Combine("samples", "feeders", "baran-wu-33.json")));

    /// <summary>
    /// <paramref name="copies"/> copies of the sample: copy 0 as published (bus ids "1".."33",
    /// substation at "1"), copy c ≥ 1 with ids "c.1".."c.33" and its bus c.1 joined to bus 1 by a
    /// short line (0.01 + j0.01 Ω, 10 kA). 33 × copies buses; import limit 5000 kW per copy unless given.
    /// </summary>
    public static Feeder BaranWu(int copies = 1, double? vMin = null, double? importKwPerCopy = null)
    {
        var sample = BaranWuSample();
        var buses = new List<Bus>();
        var lines = new List<Line>();
        for (int c = 0; c < copies; c++)
        {
            string Id(string b) => c == 0 ? b : $"{c}.{b}";
            foreach (var b in sample.Buses)
                buses.Add(b with { Id = Id(b.Id), Name = Id(b.Name), VMinPu = vMin ?? b.VMinPu });
            foreach (var l in sample.Lines)
                lines.Add(l with { From = Id(l.From), To = Id(l.To) });
            if (c > 0) lines.Add(new Line("1", Id("1"), 0.01, 0.01, 1e4));
        }
        double import = (importKwPerCopy ?? sample.Substation.ImportLimitKw) * copies;
        return Feeder.Create(copies == 1 ? sample.Name : $"{sample.Name}-x{copies}", buses, lines,
            sample.Substation with { ImportLimitKw = import }, sample.BaseMva, sample.Source);
    }
}
