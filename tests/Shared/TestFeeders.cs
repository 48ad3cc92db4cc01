using System.Globalization;
using FedGrid.Grid.Feeders;

namespace FedGrid.TestSupport;

/// <summary>
/// Feeders for tests and benchmarks, built in code from the Baran &amp; Wu (1989) 33-bus table in
/// tests/data/baran-wu-33.csv. Larger feeders join copies of it at the substation bus.
/// </summary>
internal static class TestFeeders
{
    /// <summary>Path of a file under tests/data, found by walking up from the running assembly.</summary>
    public static string DataFile(string name) => RepoFile(Path.Combine("tests", "data", name));

    /// <summary>Path of a file given relative to the repository root, found by walking up from the running assembly.</summary>
    public static string RepoFile(string relative)
    {
        for (var dir = new DirectoryInfo(AppContext.BaseDirectory); dir is not null; dir = dir.Parent)
        {
            string candidate = Path.Combine(dir.FullName, relative);
            if (File.Exists(candidate)) return candidate;
        }
        throw new FileNotFoundException($"{relative} not found above {AppContext.BaseDirectory}");
    }

    public static IReadOnlyList<(string From, string To, double R, double X, double P, double Q)> BaranWuRows()
    {
        var rows = new List<(string, string, double, double, double, double)>();
        foreach (string line in File.ReadLines(DataFile("baran-wu-33.csv")))
        {
            if (line.StartsWith('#') || line.StartsWith("from_bus", StringComparison.Ordinal) || line.Trim().Length == 0) continue;
            var f = line.Split(',');
            double D(int k) => double.Parse(f[k], CultureInfo.InvariantCulture);
            rows.Add((f[0], f[1], D(2), D(3), D(4), D(5)));
        }
        return rows;
    }

    /// <summary>
    /// <paramref name="copies"/> copies of the Baran &amp; Wu feeder: copy 0 as published (bus ids
    /// "1".."33", substation at "1"), copy c ≥ 1 with ids "c.1".."c.33" and its bus c.1 joined to bus
    /// 1 by a short line (0.01 + j0.01 Ω). 33 × copies buses. Voltage limits and ampacity are ours
    /// (common practice: ±5 % voltage band).
    /// </summary>
    public static Feeder BaranWu(int copies = 1, double vMin = 0.95, double vMax = 1.05, double ampacityA = 400,
        double importKwPerCopy = 5000, double loadScale = 1.0)
    {
        var rows = BaranWuRows();
        var buses = new List<Bus>();
        var lines = new List<Line>();
        for (int c = 0; c < copies; c++)
        {
            string Id(string b) => c == 0 ? b : $"{c}.{b}";
            buses.Add(new Bus(Id("1"), Id("1"), 12.66, 0, 0, vMin, vMax));
            foreach (var r in rows)
            {
                buses.Add(new Bus(Id(r.To), Id(r.To), 12.66, r.P * loadScale, r.Q * loadScale, vMin, vMax));
                lines.Add(new Line(Id(r.From), Id(r.To), r.R, r.X, ampacityA));
            }
            if (c > 0) lines.Add(new Line("1", Id("1"), 0.01, 0.01, 1e4));
        }
        return Feeder.Create(copies == 1 ? "baran-wu-33" : $"baran-wu-x{copies}", buses, lines,
            new Substation("1", 1.0, importKwPerCopy * copies), source: "Baran & Wu (1989)");
    }
}
