using System.Collections.Immutable;
using FedGrid.Grid.Feeders;
using FedGrid.Households.Tariffs;

namespace FedGrid.Households.Scenarios;

/// <summary>A load the scenario keeps at a bus besides its households (shop, street lighting), constant over the horizon.</summary>
/// <param name="BusId">Bus id.</param>
/// <param name="Kw">Real power, kW.</param>
/// <param name="Kvar">Reactive power, kvar.</param>
public sealed record FixedBusLoad(string BusId, double Kw, double Kvar);

/// <summary>
/// Everything one simulation needs: the feeder, its households with their traces over the
/// horizon, the tariff, the calendar and the loads kept fixed. The feeder file's own bus loads
/// are not used: each bus carries its households plus its <see cref="FixedLoads"/>.
/// </summary>
/// <param name="Name">Scenario name.</param>
/// <param name="Feeder">The radial feeder.</param>
/// <param name="Households">Households, each on a bus of the feeder.</param>
/// <param name="Traces">One trace per household, in the same order, all of the same length.</param>
/// <param name="Tariff">Energy prices.</param>
/// <param name="Calendar">Day of the week of slot 0.</param>
/// <param name="FixedLoads">Loads kept fixed at buses.</param>
/// <param name="Seed">Seed the traces (and a real-time tariff) were drawn from; 0 for imported data.</param>
public sealed record Scenario(string Name, Feeder Feeder, ImmutableArray<Household> Households, ImmutableArray<HouseholdTrace> Traces,
    ITariff Tariff, SlotCalendar Calendar, ImmutableArray<FixedBusLoad> FixedLoads, ulong Seed)
{
    /// <summary>Slots in the horizon.</summary>
    public int SlotCount => Traces.IsDefaultOrEmpty ? 0 : Traces[0].SlotCount;

    /// <summary>Whole days in the horizon.</summary>
    public double Days => SlotCount / (double)SlotCalendar.SlotsPerDay;

    /// <summary>
    /// Checks that the parts fit together: households on existing buses, unique ids, at most one appliance of each kind,
    /// sane parameters, one trace per household of equal length, sessions ordered and not overlapping.
    /// </summary>
    /// <exception cref="ArgumentException">Names the household, appliance or trace and what is wrong.</exception>
    public void Validate()
    {
        if (Households.IsDefaultOrEmpty) throw new ArgumentException($"scenario '{Name}': no households");
        if (Traces.IsDefault || Traces.Length != Households.Length)
            throw new ArgumentException($"scenario '{Name}': {Households.Length} households but {(Traces.IsDefault ? 0 : Traces.Length)} traces");
        int slots = Traces[0].SlotCount;
        if (slots == 0) throw new ArgumentException($"scenario '{Name}': traces are empty");
        var ids = new HashSet<string>(StringComparer.Ordinal);
        for (int i = 0; i < Households.Length; i++)
        {
            Household h = Households[i];
            string at = $"scenario '{Name}': household '{h.Id}'";
            if (!ids.Add(h.Id)) throw new ArgumentException($"{at}: duplicate household id");
            if (!Feeder.TryGetIndex(h.BusId, out int bus)) throw new ArgumentException($"{at}: bus '{h.BusId}' is not on feeder '{Feeder.Name}'");
            if (bus == Feeder.Network.SlackIndex) throw new ArgumentException($"{at}: bus '{h.BusId}' is the substation bus");
            if (!(h.PowerFactor > 0 && h.PowerFactor <= 1)) throw new ArgumentException($"{at}: power factor must be in (0, 1], got {h.PowerFactor}");
            var kinds = new HashSet<string>(StringComparer.Ordinal);
            foreach (Appliance a in h.Appliances)
            {
                if (!kinds.Add(a.Kind)) throw new ArgumentException($"{at}: more than one {a.Kind} appliance");
                if (!(a.DiscomfortWeight >= 0 && double.IsFinite(a.DiscomfortWeight)))
                    throw new ArgumentException($"{at}, appliance '{a.Id}': discomfort weight must be finite and non-negative");
                string? bad = a switch
                {
                    DeferrableLoad d when !(d.MaxKw > 0 && d.MaxKw < 1000) => "charger power must be in (0, 1000) kW",
                    DeferrableLoad d when !(d.UnmetEnergyPenalty >= 0) => "unmet-energy penalty must be non-negative",
                    ThermalStorage t when !(t.TankLitres > 0 && t.HeaterKw > 0 && t.LossKwPerK >= 0) => "tank volume and heater power must be positive, loss coefficient non-negative",
                    ThermalStorage t when !(t.InletC < t.LowerComfortC && t.LowerComfortC < t.SetpointC && t.SetpointC < 100) => "need inlet < lower comfort < setpoint < 100 °C",
                    CurtailableLoad c when !(c.MinFraction is >= 0 and <= 1 && c.RatedKw >= 0) => "minimum fraction must be in [0, 1] and rated power non-negative",
                    _ => null,
                };
                if (bad is not null) throw new ArgumentException($"{at}, appliance '{a.Id}': {bad}");
            }
            HouseholdTrace tr = Traces[i];
            string tat = $"scenario '{Name}': trace of household '{h.Id}'";
            if (tr.HouseholdId != h.Id) throw new ArgumentException($"{tat}: is labelled '{tr.HouseholdId}'");
            if (tr.BaseKw.Length != slots || tr.Occupied.Length != slots || tr.HotWaterLitres.Length != slots || tr.CurtailableDesiredKw.Length != slots)
                throw new ArgumentException($"{tat}: every series must have {slots} slots");
            for (int t = 0; t < slots; t++)
            {
                if (!(tr.BaseKw[t] >= 0 && double.IsFinite(tr.BaseKw[t]))) throw new ArgumentException($"{tat}: base load at slot {t} must be finite and non-negative");
                if (!(tr.HotWaterLitres[t] >= 0)) throw new ArgumentException($"{tat}: hot-water draw at slot {t} must be non-negative");
                if (!(tr.CurtailableDesiredKw[t] >= 0)) throw new ArgumentException($"{tat}: curtailable desired power at slot {t} must be non-negative");
            }
            int last = -1;
            foreach (ChargingSession s in tr.Sessions)
            {
                if (s.ArrivalSlot < 0 || s.DeadlineSlot <= s.ArrivalSlot || s.ArrivalSlot < last || !(s.EnergyKwh >= 0))
                    throw new ArgumentException($"{tat}: charging sessions must be in time order, not overlapping, with deadline after arrival and energy ≥ 0 ({s})");
                last = s.DeadlineSlot;
            }
        }
        foreach (FixedBusLoad f in FixedLoads)
        {
            if (!Feeder.TryGetIndex(f.BusId, out _)) throw new ArgumentException($"scenario '{Name}': fixed load on unknown bus '{f.BusId}'");
            if (!double.IsFinite(f.Kw) || !double.IsFinite(f.Kvar)) throw new ArgumentException($"scenario '{Name}': fixed load at bus '{f.BusId}' must be finite");
        }
    }

    /// <summary>The scenario's fixed loads summed per bus (indexed as <see cref="Feeder.Buses"/>), kW and kvar.</summary>
    public (double[] Kw, double[] Kvar) FixedLoadPerBus()
    {
        int buses = Feeder.Network.BusCount;
        var kw = new double[buses];
        var kvar = new double[buses];
        foreach (FixedBusLoad f in FixedLoads)
        {
            int b = Feeder.IndexOf(f.BusId);
            kw[b] += f.Kw;
            kvar[b] += f.Kvar;
        }
        return (kw, kvar);
    }
}
