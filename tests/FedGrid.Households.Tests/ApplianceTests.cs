using FedGrid.Households.Simulation;

namespace FedGrid.Households.Tests;

public class DeferrableLoadTests
{
    private static readonly DeferrableLoad Charger = new("vehicle", 7.2, 0.02, 1.0);

    [Fact]
    public void Minimum_is_what_full_power_afterwards_cannot_cover()
    {
        // Hand arithmetic: 10 kWh left, deadline 6 slots ahead → 5 slots after this one at 7.2 kW × 0.25 h = 9 kWh,
        // so this slot must deliver 1 kWh = 4 kW.
        Assert.Equal(4.0, Charger.MinKw(10, slot: 100, deadlineSlot: 106), 12);
        // 8 slots ahead: 7 × 1.8 kWh = 12.6 kWh ≥ 10 kWh, nothing is urgent.
        Assert.Equal(0.0, Charger.MinKw(10, 100, 108), 12);
        // Last slot: everything left, but at most the desired (full) power.
        Assert.Equal(7.2, Charger.MinKw(10, 105, 106), 12);
        Assert.Equal(4.0, Charger.MinKw(1, 105, 106), 12);
        Assert.Equal(0.0, Charger.MinKw(5, 106, 106));
    }

    [Fact]
    public void Desired_is_full_power_until_the_energy_is_in()
    {
        Assert.Equal(7.2, Charger.DesiredKw(10), 12);
        Assert.Equal(2.0, Charger.DesiredKw(0.5), 12); // 0.5 kWh in one quarter hour
        Assert.Equal(0.0, Charger.DesiredKw(0));
    }

    [Fact]
    public void Deferred_energy_carries_forward_and_the_minimum_rises_to_meet_the_deadline()
    {
        // 6 kWh wanted between slot 2 and slot 10 (8 slots) at 7.2 kW.
        var h = TestFeeders.Home("h", Charger);
        var env = new DemandResponseEnvironment(TestFeeders.OneHome(h, TestFeeders.Trace("h", 12, sessions: [new ChargingSession(2, 10, 6)])));
        var r = env.CreateResult();
        var sp = new double[1];
        env.Step(sp, r);
        env.Step(sp, r);
        Assert.Equal(2, env.Slot);
        Assert.Equal(new ChargingSession(2, 10, 6), env.CurrentSession(0));
        Assert.Equal(6, env.DeferrableRemainingKwh[0], 12);
        Assert.Equal(7.2, env.FlexDesiredKw[0], 12);
        var mins = new List<double>();
        while (env.Slot < 10)
        {
            mins.Add(env.FlexMinKw[0]);
            sp[0] = env.FlexMinKw[0];
            double desired = env.FlexDesiredKw[0];
            env.Step(sp, r);
            // Each deferred kWh costs the deferral weight 0.02 $/kWh; nothing is unmet.
            Assert.Equal(0.02 * (desired - sp[0]) * 0.25, r.DiscomfortDollars[0], 12);
        }
        // Charging only at the minimum: nothing until the last slots, then full power; 6 kWh = 3 slots at 7.2 kW + 0.6 kWh.
        Assert.Equal([0, 0, 0, 0, 2.4, 7.2, 7.2, 7.2], mins.Select(m => Math.Round(m, 9)));
        Assert.Equal(0, env.DeferrableRemainingKwh[0], 12);
        Assert.Equal(0, env.FlexDesiredKw[0]);
        Assert.Null(env.CurrentSession(0));
    }

    [Fact]
    public void Energy_missing_at_the_deadline_is_penalised()
    {
        // 10 kWh in 4 slots at 7.2 kW: at most 7.2 kWh, 2.8 kWh unmet at 1 $/kWh.
        var h = TestFeeders.Home("h", Charger);
        var env = new DemandResponseEnvironment(TestFeeders.OneHome(h, TestFeeders.Trace("h", 6, sessions: [new ChargingSession(0, 4, 10)])));
        var r = env.CreateResult();
        var sp = new double[1];
        double total = 0;
        for (int t = 0; t < 4; t++)
        {
            Assert.Equal(7.2, env.FlexMinKw[0], 12); // infeasible from the start: the minimum is full power
            sp[0] = env.FlexDesiredKw[0];
            env.Step(sp, r);
            total += r.DiscomfortDollars[0];
        }
        Assert.Equal(2.8 * 1.0, total, 9);
        Assert.Equal(0, env.FlexDesiredKw[0]);
    }
}

public class ThermalStorageTests
{
    // Handbook values: c = 4.186 kJ/(kg·K) for water, density 1 kg/L; Q = m·c·ΔT.
    private static readonly ThermalStorage Tank = new("water heater", 150, 3.0, 60, 45, 15, 20, 0.0, 0.5);

    [Fact]
    public void Stored_energy_is_m_c_delta_T()
    {
        Assert.Equal(150 * 4.186 / 3600, Tank.HeatCapacityKwhPerK, 12);
        Assert.Equal(7.84875, Tank.EnergyAt(60), 9); // 150 kg × 4.186 kJ/(kg·K) × 45 K = 28 255.5 kJ = 7.84875 kWh
        Assert.Equal(60, Tank.TemperatureAt(7.84875), 9);
    }

    [Fact]
    public void A_draw_mixes_inlet_water_into_the_tank()
    {
        // 50 L drawn from a 150 L tank at 60 °C, refilled at 15 °C: (100·60 + 50·15)/150 = 45 °C;
        // the draw removes 50 kg × 4.186 × 45 K = 9 418.5 kJ = 2.61625 kWh.
        double e = Tank.EnergyAfter(Tank.EnergyAt(60), 0, 50);
        Assert.Equal(45, Tank.TemperatureAt(e), 9);
        Assert.Equal(2.61625, Tank.EnergyAt(60) - e, 9);
    }

    [Fact]
    public void Heating_for_a_quarter_hour_raises_the_temperature_by_P_dt_over_m_c()
    {
        // 3 kW × 900 s = 2 700 kJ into 150 kg × 4.186 kJ/(kg·K) = 627.9 kJ/K → +4.3000 K.
        double e = Tank.EnergyAfter(Tank.EnergyAt(40), 3.0, 0);
        Assert.Equal(40 + 2700 / 627.9, Tank.TemperatureAt(e), 9);
    }

    [Fact]
    public void Standing_loss_is_UA_times_tank_to_ambient_difference()
    {
        var lossy = Tank with { LossKwPerK = 0.002 };
        // 2 W/K × (60 − 20) K = 80 W for 0.25 h = 0.02 kWh.
        Assert.Equal(0.02, lossy.EnergyAt(60) - lossy.EnergyAfter(lossy.EnergyAt(60), 0, 0), 12);
    }

    [Fact]
    public void Minimum_keeps_the_comfort_bound_and_desired_reaches_the_setpoint()
    {
        // At 46 °C with a 10 L draw: passive end = E·(1 − 10/150); minimum lifts it back to 45 °C, desired to 60 °C.
        double e = Tank.EnergyAt(46);
        double passive = e * (1 - 10.0 / 150);
        Assert.Equal((Tank.EnergyAt(45) - passive) / 0.25, Tank.MinKw(e, 10), 9);
        Assert.Equal(3.0, Tank.DesiredKw(e, 10)); // far from the setpoint: full element power
        Assert.Equal(0, Tank.MinKw(Tank.EnergyAt(55), 0));
        Assert.Equal((Tank.EnergyAt(60) - Tank.EnergyAt(59.5)) / 0.25, Tank.DesiredKw(Tank.EnergyAt(59.5), 0), 9);
        Assert.Equal(0.5 * (Tank.EnergyAt(45) - Tank.EnergyAt(44)), Tank.Discomfort(Tank.EnergyAt(44)), 12);
        Assert.Equal(0, Tank.Discomfort(Tank.EnergyAt(50)));
    }

    [Fact]
    public void Environment_follows_the_tank_balance_slot_by_slot()
    {
        var lossy = Tank with { LossKwPerK = 0.0015 };
        var h = TestFeeders.Home("h", lossy);
        double[] draws = [0, 40, 0, 0, 10, 0];
        var env = new DemandResponseEnvironment(TestFeeders.OneHome(h, TestFeeders.Trace("h", 6, drawLitres: draws, tankC: 50)));
        var r = env.CreateResult();
        double e = lossy.EnergyAt(50);
        for (int t = 0; t < 6; t++)
        {
            double p = 0.5 * (env.FlexMinKw[0] + env.FlexDesiredKw[0]);
            Assert.Equal(lossy.MinKw(e, draws[t]), env.FlexMinKw[0], 12);
            env.Step([p], r);
            e = lossy.EnergyAfter(e, p, draws[t]);
            Assert.Equal(e, env.TankEnergyKwh[0], 12);
            Assert.Equal(p, r.ThermalKw[0], 12);
        }
    }
}

public class CurtailableAndSplitTests
{
    [Fact]
    public void Curtailable_minimum_is_a_fraction_and_shortfall_is_priced_per_kWh()
    {
        var pump = new CurtailableLoad("pool pump", 1.1, 0.5, 0.04, CurtailableUse.PoolPump);
        Assert.Equal(0.55, pump.MinKw(1.1), 12);
        Assert.Equal(0.04 * 0.5 * 0.25, pump.Discomfort(1.1, 0.6), 12);
        Assert.Equal(0, pump.Discomfort(1.1, 1.1));
    }

    [Fact]
    public void Household_setpoint_gives_minimums_first_then_the_highest_weight()
    {
        var ev = new DeferrableLoad("vehicle", 4, 0.02, 1.0);
        var tank = new ThermalStorage("water heater", 150, 3, 60, 45, 15, 20, 0, 0.5);
        var hvac = new CurtailableLoad("heat pump", 2, 0.4, 0.08, CurtailableUse.SpaceConditioning);
        var h = TestFeeders.Home("h", ev, tank, hvac);
        var trace = TestFeeders.Trace("h", 6, sessions: [new ChargingSession(0, 5, 4)], curtailKw: [2, 2, 2, 2, 2, 2], tankC: 44.5);
        var env = new DemandResponseEnvironment(TestFeeders.OneHome(h, trace));
        var (evMin, evDes) = env.ApplianceBounds(0, ApplianceKind.Deferrable);
        var (thMin, thDes) = env.ApplianceBounds(0, ApplianceKind.Thermal);
        var (cuMin, cuDes) = env.ApplianceBounds(0, ApplianceKind.Curtailable);
        Assert.Equal((0.0, 4.0), (evMin, evDes)); // 4 kWh by slot 5: the 4 later slots at 4 kW cover it, nothing urgent
        Assert.True(thMin > 0 && thDes == 3.0); // the tank is below 45 °C
        Assert.Equal(0.8, cuMin, 12);
        Assert.Equal(evMin + thMin + cuMin, env.FlexMinKw[0], 12);
        Assert.Equal(evDes + thDes + cuDes, env.FlexDesiredKw[0], 12);
        // Extra 1 kW above the minimums: the heater (weight 0.5) gets it first, up to its desired power.
        double s = env.FlexMinKw[0] + 1.0;
        var r = env.CreateResult();
        env.Step([s], r);
        Assert.Equal(Math.Min(thDes, thMin + 1.0), r.ThermalKw[0], 12);
        Assert.Equal(cuMin + Math.Max(0, 1.0 - (thDes - thMin)), r.CurtailableKw[0], 12);
        Assert.Equal(evMin, r.DeferrableKw[0], 12);
    }
}

public class HouseholdTests
{
    [Fact]
    public void Reactive_power_per_kW_follows_the_power_factor()
    {
        // tan(acos(0.95)) = 0.328684 (trigonometry); unity power factor draws none.
        Assert.Equal(0.328684, TestFeeders.Home("h").KvarPerKw, 6);
        Assert.Equal(0, (TestFeeders.Home("h") with { PowerFactor = 1.0 }).KvarPerKw);
    }

    [Fact]
    public void Appliances_are_found_by_kind()
    {
        var ev = new DeferrableLoad("vehicle", 7, 0.02, 1);
        var pump = new CurtailableLoad("pool pump", 1.1, 0.5, 0.03, CurtailableUse.PoolPump);
        var h = TestFeeders.Home("h", pump, ev);
        Assert.Same(ev, h.Deferrable);
        Assert.Same(pump, h.Curtailable);
        Assert.Null(h.Thermal);
        Assert.Equal(("deferrable", "curtailable"), (ev.Kind, pump.Kind));
    }
}
