using FedGrid.Charts;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Cli.Commands;

/// <summary>The demo's one chart: substation import per baseline over the horizon, with the import limit.</summary>
internal static class DemoPlot
{
    public static byte[] FeederLoadPng(Scenario scenario, IReadOnlyList<(RunSummary Summary, IReadOnlyList<SlotRecord> Slots)> runs)
    {
        var series = new List<Series>();
        foreach (var (summary, slots) in runs)
        {
            var xs = new double[slots.Count];
            var ys = new double[slots.Count];
            for (int t = 0; t < slots.Count; t++)
            {
                xs[t] = slots[t].Slot * SlotCalendar.SlotHours;
                ys[t] = slots[t].SubstationImportKw;
            }
            series.Add(new Series(summary.Policy, xs, ys, SeriesKind.Step));
        }
        var chart = new Chart($"Feeder {scenario.Feeder.Name}: substation import per baseline", "time since start [h]", "substation import [kW]",
            series, [new ReferenceLine("import limit", scenario.Feeder.Substation.ImportLimitKw)]);
        return PngChartRenderer.Render(chart, 1200, 480);
    }
}
