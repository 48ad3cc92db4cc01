using System.Collections.Immutable;

namespace FedGrid.Households.Simulation;

/// <summary>Feeder-level figures of one slot of a run.</summary>
/// <param name="Slot">Horizon slot.</param>
/// <param name="PricePerKwh">Price, $ per kWh.</param>
/// <param name="HouseholdsKw">Sum of household loads, kW.</param>
/// <param name="FlexibleKw">Sum of flexible setpoints, kW.</param>
/// <param name="SubstationImportKw">Substation import (households + fixed loads + losses), kW.</param>
/// <param name="LossKw">Line losses, kW.</param>
/// <param name="MinVoltagePu">Lowest bus voltage, per unit.</param>
/// <param name="MinVoltageBus">Id of the bus with the lowest voltage.</param>
/// <param name="ViolationCount">Limits broken in the slot.</param>
/// <param name="BillDollars">Sum of household bills, $.</param>
/// <param name="DiscomfortDollars">Sum of household discomfort, $.</param>
/// <param name="Converged">Whether the power flow converged.</param>
public sealed record SlotRecord(int Slot, double PricePerKwh, double HouseholdsKw, double FlexibleKw, double SubstationImportKw,
    double LossKw, double MinVoltagePu, string MinVoltageBus, int ViolationCount, double BillDollars, double DiscomfortDollars, bool Converged);

/// <summary>Totals of one run of a policy over the horizon.</summary>
/// <param name="Policy">Policy name.</param>
/// <param name="Days">Length of the horizon in days.</param>
/// <param name="BillDollars">Sum of all household bills, $.</param>
/// <param name="DiscomfortDollars">Sum of all household discomfort, $.</param>
/// <param name="PeakKw">Highest substation import, kW.</param>
/// <param name="ViolationSlots">Slots with at least one broken limit.</param>
/// <param name="LossesKwh">Energy lost in the lines, kWh.</param>
/// <param name="MinVoltagePu">Lowest bus voltage over the run, per unit.</param>
/// <param name="EnergyKwh">Energy consumed by the households, kWh.</param>
/// <param name="NonConvergedSlots">Slots whose power flow did not converge.</param>
public sealed record RunSummary(string Policy, double Days, double BillDollars, double DiscomfortDollars, double PeakKw, int ViolationSlots,
    double LossesKwh, double MinVoltagePu, double EnergyKwh, int NonConvergedSlots)
{
    /// <summary>(bill + discomfort) per day, $ — the cost the MDP minimises, per day.</summary>
    public double DailyCostDollars => (BillDollars + DiscomfortDollars) / Days;
}

/// <summary>Runs a policy over a whole horizon and keeps per-slot and total figures.</summary>
public static class PolicyRun
{
    /// <summary>Resets the environment and runs <paramref name="policy"/> to the end of the horizon.</summary>
    /// <param name="environment">The environment (reset first).</param>
    /// <param name="policy">The policy.</param>
    /// <param name="progress">Called after each simulated day with the number of days done, or null.</param>
    public static (RunSummary Summary, ImmutableArray<SlotRecord> Slots) Run(DemandResponseEnvironment environment, IDemandResponsePolicy policy,
        Action<int>? progress = null)
    {
        ArgumentNullException.ThrowIfNull(environment);
        ArgumentNullException.ThrowIfNull(policy);
        environment.Reset();
        var feeder = environment.Scenario.Feeder;
        var setpoints = new double[environment.HouseholdCount];
        StepResult r = environment.CreateResult();
        var slots = ImmutableArray.CreateBuilder<SlotRecord>(environment.SlotCount);
        double bill = 0, discomfort = 0, peak = double.NegativeInfinity, losses = 0, vmin = double.PositiveInfinity, energy = 0;
        int violating = 0, failed = 0;
        while (!environment.Done)
        {
            policy.Decide(environment, setpoints);
            double flex = setpoints.Sum();
            environment.Step(setpoints, r);
            double households = r.HouseholdKw.Sum();
            slots.Add(new SlotRecord(r.Slot, r.PricePerKwh, households, flex, r.SubstationImportKw, r.LossKw, r.MinVoltagePu,
                feeder.Buses[r.PowerFlow.MinVoltageBus].Id, r.ViolationCount, r.TotalBillDollars, r.TotalDiscomfortDollars, r.Converged));
            bill += r.TotalBillDollars;
            discomfort += r.TotalDiscomfortDollars;
            peak = Math.Max(peak, r.SubstationImportKw);
            losses += r.LossKw * SlotCalendar.SlotHours;
            vmin = Math.Min(vmin, r.MinVoltagePu);
            energy += households * SlotCalendar.SlotHours;
            if (r.ViolationCount > 0) violating++;
            if (!r.Converged) failed++;
            if (progress is not null && environment.Slot % SlotCalendar.SlotsPerDay == 0)
                progress(environment.Slot / SlotCalendar.SlotsPerDay);
        }
        var summary = new RunSummary(policy.Name, environment.Scenario.Days, bill, discomfort, peak, violating, losses, vmin, energy, failed);
        return (summary, slots.MoveToImmutable());
    }
}
