using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Households.Tests;

public class EnvironmentTests
{
    [Fact]
    public void Bills_are_price_times_power_times_a_quarter_hour()
    {
        var scenario = DefaultScenario.Create(3, days: 1);
        var env = new DemandResponseEnvironment(scenario);
        var r = env.CreateResult();
        var sp = new double[env.HouseholdCount];
        for (int t = 0; t < 96; t++)
        {
            double price = scenario.Tariff.PriceAt(t);
            for (int i = 0; i < sp.Length; i++) sp[i] = 0.3 * env.FlexMinKw[i] + 0.7 * env.FlexDesiredKw[i];
            double[] expected = new double[sp.Length];
            for (int i = 0; i < sp.Length; i++) expected[i] = price * (env.BaseKw[i] + sp[i]) * 0.25;
            env.Step(sp, r);
            for (int i = 0; i < sp.Length; i++) Assert.Equal(expected[i], r.BillDollars[i], 12);
            Assert.Equal(expected.Sum(), r.TotalBillDollars, 9);
        }
        Assert.True(env.Done);
    }

    [Fact]
    public void Each_step_carries_an_exact_power_flow_of_the_households()
    {
        var scenario = DefaultScenario.Create(3, days: 1);
        var env = new DemandResponseEnvironment(scenario);
        var r = env.CreateResult();
        var sp = new double[env.HouseholdCount];
        for (int t = 0; t < 80; t++)
        {
            env.FlexDesiredKw.CopyTo(sp);
            env.Step(sp, r);
        }
        Assert.True(r.Converged);
        // Power balance: import = households + fixed shop load + line losses.
        Assert.Equal(r.HouseholdKw.Sum() + 3.0 + r.LossKw, r.SubstationImportKw, 6);
        // Reactive balance: each household draws P·tan(acos(pf)); the shop 1 kvar; plus the lines' reactive loss.
        double q = 1.0;
        for (int i = 0; i < sp.Length; i++) q += r.HouseholdKw[i] * Math.Tan(Math.Acos(scenario.Households[i].PowerFactor));
        var net = scenario.Feeder.Network;
        Assert.Equal(q + net.ToKw(r.PowerFlow.ReactiveLossPu), net.ToKw(r.PowerFlow.SubstationQPu), 6);
        Assert.True(r.LossKw > 0);
        Assert.Equal(1.02, r.PowerFlow.VoltagePu[scenario.Feeder.IndexOf("B00")], 9);
        Assert.True(r.MinVoltagePu < 1.02);
        // The far end of the trunk sits lower than its first cabinet.
        Assert.True(r.PowerFlow.VoltagePu[scenario.Feeder.IndexOf("B08")] < r.PowerFlow.VoltagePu[scenario.Feeder.IndexOf("B01")]);
        Assert.Equal(r.PowerFlow.FindViolations(scenario.Feeder).Count, r.ViolationCount);
    }

    [Fact]
    public void Violation_count_agrees_with_the_violation_list_over_a_week()
    {
        var scenario = DefaultScenario.Create();
        var env = new DemandResponseEnvironment(scenario);
        var r = env.CreateResult();
        var sp = new double[env.HouseholdCount];
        int slotsWithViolations = 0;
        while (!env.Done)
        {
            env.FlexDesiredKw.CopyTo(sp);
            env.Step(sp, r);
            Assert.Equal(r.PowerFlow.FindViolations(scenario.Feeder).Count, r.ViolationCount);
            if (r.ViolationCount > 0) slotsWithViolations++;
        }
        Assert.True(slotsWithViolations > 0, "the default scenario is tuned so that no control breaks a limit at the evening peak");
    }

    [Fact]
    public void Setpoints_outside_the_box_are_refused_with_the_household_named()
    {
        var scenario = DefaultScenario.Create(3, days: 1);
        var env = new DemandResponseEnvironment(scenario);
        var r = env.CreateResult();
        var sp = new double[env.HouseholdCount];
        env.FlexDesiredKw.CopyTo(sp);
        sp[4] = env.FlexDesiredKw[4] + 0.5;
        var e = Assert.Throws<ArgumentException>(() => env.Step(sp, r));
        Assert.Contains("'H05'", e.Message);
        Assert.Contains("outside its box", e.Message);
        sp[4] = env.FlexMinKw[4] - 0.1;
        Assert.Throws<ArgumentException>(() => env.Step(sp, r));
        sp[4] = double.NaN;
        Assert.Throws<ArgumentException>(() => env.Step(sp, r));
        Assert.Throws<ArgumentException>(() => env.Step(new double[3], r));
        Assert.Equal(0, env.Slot); // nothing was simulated
    }

    [Fact]
    public void Stepping_past_the_horizon_is_an_error_and_reset_starts_over()
    {
        var scenario = DefaultScenario.Create(3, days: 1);
        var env = new DemandResponseEnvironment(scenario);
        var r = env.CreateResult();
        var sp = new double[env.HouseholdCount];
        double firstBase = env.BaseKw[0];
        while (!env.Done) { env.FlexMinKw.CopyTo(sp); env.Step(sp, r); }
        Assert.Throws<InvalidOperationException>(() => env.Step(sp, r));
        env.Reset();
        Assert.Equal(0, env.Slot);
        Assert.Equal(firstBase, env.BaseKw[0]);
    }

    [Fact]
    public void A_step_allocates_nothing()
    {
        var env = new DemandResponseEnvironment(DefaultScenario.Create(3, days: 2));
        var r = env.CreateResult();
        var sp = new double[env.HouseholdCount];
        var policy = new PriceThresholdPolicy(0.38, 12);
        for (int t = 0; t < 10; t++) { policy.Decide(env, sp); env.Step(sp, r); } // warm up
        long before = GC.GetAllocatedBytesForCurrentThread();
        for (int t = 0; t < 150; t++) { policy.Decide(env, sp); env.Step(sp, r); }
        Assert.Equal(0, GC.GetAllocatedBytesForCurrentThread() - before);
    }

    [Fact]
    public void Scenario_validation_names_the_problem()
    {
        var h = TestFeeders.Home("h", new DeferrableLoad("vehicle", 7, 0.02, 1)) with { BusId = "nowhere" };
        var e = Assert.Throws<ArgumentException>(() => new DemandResponseEnvironment(TestFeeders.OneHome(h, TestFeeders.Trace("h", 4))));
        Assert.Contains("bus 'nowhere'", e.Message);
        var two = TestFeeders.Home("h", new DeferrableLoad("a", 7, 0.02, 1), new DeferrableLoad("b", 3, 0.02, 1));
        Assert.Contains("more than one deferrable", Assert.Throws<ArgumentException>(() => new DemandResponseEnvironment(TestFeeders.OneHome(two, TestFeeders.Trace("h", 4)))).Message);
        var tank = TestFeeders.Home("h", new ThermalStorage("t", 150, 3, 40, 45, 12, 20, 0.001, 0.5));
        Assert.Contains("lower comfort", Assert.Throws<ArgumentException>(() => new DemandResponseEnvironment(TestFeeders.OneHome(tank, TestFeeders.Trace("h", 4)))).Message);
        var ok = TestFeeders.Home("h");
        Assert.Contains("labelled", Assert.Throws<ArgumentException>(() => new DemandResponseEnvironment(TestFeeders.OneHome(ok, TestFeeders.Trace("x", 4)))).Message);
    }
}

public class BaselineTests
{
    [Fact]
    public void The_price_rule_lowers_the_peak_and_the_bill_of_the_default_week()
    {
        var env = new DemandResponseEnvironment(DefaultScenario.Create());
        var (none, noneSlots) = PolicyRun.Run(env, new NoControlPolicy());
        var (rule, _) = PolicyRun.Run(env, new PriceThresholdPolicy(DefaultScenario.PeakPrice, 12));
        Assert.Equal(7 * 96, noneSlots.Length);
        Assert.True(rule.PeakKw < none.PeakKw, $"rule peak {rule.PeakKw:0.0} kW vs no control {none.PeakKw:0.0} kW");
        Assert.True(rule.BillDollars < none.BillDollars);
        Assert.True(rule.DiscomfortDollars > none.DiscomfortDollars); // deferring costs comfort
        Assert.Equal(0, none.DiscomfortDollars, 9);                  // running at desired costs none
        Assert.True(none.ViolationSlots > rule.ViolationSlots);
        Assert.Equal(0, none.NonConvergedSlots);
        // Shifting keeps most energy; curtailed heat-pump load, cooler tanks (smaller standing loss and draws) remove a few percent.
        Assert.InRange(rule.EnergyKwh / none.EnergyKwh, 0.95, 1.0);
    }

    [Fact]
    public void No_control_runs_at_desired_and_the_rule_at_minimum_in_the_peak()
    {
        var env = new DemandResponseEnvironment(DefaultScenario.Create(9, days: 1));
        var sp = new double[env.HouseholdCount];
        var rule = new PriceThresholdPolicy(DefaultScenario.PeakPrice, 4);
        var r = env.CreateResult();
        while (!env.Done)
        {
            new NoControlPolicy().Decide(env, sp);
            Assert.True(sp.AsSpan().SequenceEqual(env.FlexDesiredKw));
            rule.Decide(env, sp);
            int sod = env.Slot % 96;
            if (sod is >= 64 and < 88) Assert.True(sp.AsSpan().SequenceEqual(env.FlexMinKw));
            if (sod < 60) Assert.True(sp.AsSpan().SequenceEqual(env.FlexDesiredKw));
            if (sod == 89) // two slots after the peak (last peak slot 21:45): households with m mod 5 in {0, 1} have restarted, the others wait
                for (int m = 0; m < sp.Length; m++) Assert.Equal(m % 5 == 0 || m % 5 == 1 ? env.FlexDesiredKw[m] : env.FlexMinKw[m], sp[m]);
            env.Step(sp, r);
        }
    }
}

public class RuleThresholdTests
{
    [Fact]
    public void Threshold_is_the_peak_price_or_the_dearest_fifth()
    {
        Assert.Equal(0.38, PriceThresholdPolicy.ThresholdFor(DefaultScenario.CreateTariff(new SlotCalendar()), 96));
        // Prices 0.01, 0.02, ..., 1.00 over 100 slots: the 80th percentile (index floor(0.8·99) = 79) is 0.80.
        var rt = new StepTariff();
        Assert.Equal(0.80, PriceThresholdPolicy.ThresholdFor(rt, 100), 12);
    }

    private sealed class StepTariff : Tariffs.ITariff
    {
        public string Name => "steps";
        public double PriceAt(int slot) => (100 - slot) / 100.0;
    }

    [Fact]
    public void Fixed_loads_are_summed_per_bus_in_feeder_order()
    {
        var scenario = DefaultScenario.Create(3, days: 1);
        var doubled = scenario with { FixedLoads = scenario.FixedLoads.AddRange(scenario.FixedLoads) };
        var (kw, kvar) = doubled.FixedLoadPerBus();
        Assert.Equal(scenario.Feeder.Buses.Count, kw.Length);
        Assert.NotEmpty(scenario.FixedLoads);
        foreach (FixedBusLoad f in scenario.FixedLoads)
        {
            int b = scenario.Feeder.IndexOf(f.BusId);
            double expectedKw = scenario.FixedLoads.Where(g => g.BusId == f.BusId).Sum(g => g.Kw) * 2;
            double expectedKvar = scenario.FixedLoads.Where(g => g.BusId == f.BusId).Sum(g => g.Kvar) * 2;
            Assert.Equal(expectedKw, kw[b], 12);
            Assert.Equal(expectedKvar, kvar[b], 12);
        }
        Assert.Equal(2 * scenario.FixedLoads.Sum(f => f.Kw), kw.Sum(), 9);
    }
}
