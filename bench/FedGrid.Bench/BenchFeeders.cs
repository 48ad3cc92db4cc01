using FedGrid.Grid.Feeders;

namespace FedGrid.Bench;

/// <summary>The feeders every power-flow benchmark uses: the Baran &amp; Wu sample and generated feeders (seed 1).</summary>
internal static class BenchFeeders
{
    public static Feeder ForBusCount(int buses) =>
        buses == 33 ? FeederFile.Load(RepoFiles.BaranWu33) : FeederGenerator.Generate(buses, seed: 1);
}
