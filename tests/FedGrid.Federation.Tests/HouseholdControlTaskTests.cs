using FedGrid.Federation.Training;
using FedGrid.Grid.Projection;
using FedGrid.Households;
using FedGrid.Households.Scenarios;
using FedGrid.Households.Simulation;

namespace FedGrid.Federation.Tests;

public class HouseholdControlTaskTests
{
    private static readonly Scenario TwoDays = DefaultScenario.Create(DefaultScenario.DefaultSeed, 2);

    [Fact]
    public void State_bounds_and_costs_match_the_environment_slot_by_slot()
    {
        var task = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false));
        var env = new DemandResponseEnvironment(TwoDays);
        StepResult r = env.CreateResult();
        int n = task.AgentCount, k = task.StateSizePerAgent;
        Assert.Equal(32, n);
        Assert.Equal(HouseholdControlTask.FeatureNames.Count, k);
        float[] state = new float[n * k], lo = new float[n], hi = new float[n], act = new float[n], cost = new float[n];
        double[] setpoints = new double[n];
        int dayEnds = 0;
        for (int t = 0; t < TwoDays.SlotCount; t++)
        {
            task.Observe(state);
            task.GetBounds(lo, hi);
            double angle = 2 * Math.PI * (t % 96) / 96.0;
            for (int m = 0; m < n; m++)
            {
                ReadOnlySpan<float> x = state.AsSpan(m * k, k);
                Assert.Equal(env.BaseKw[m] / 5.0, x[0], 1e-6);
                Assert.Equal(env.FlexMinKw[m] / 5.0, x[1], 1e-6);
                Assert.Equal(env.FlexDesiredKw[m] / 5.0, x[2], 1e-6);
                Assert.Equal(env.PricePerKwh / 0.25, x[3], 1e-6);
                Assert.Equal(Math.Sin(angle), x[4], 1e-6);
                Assert.Equal(Math.Cos(angle), x[5], 1e-6);
                Assert.Equal(0f, x[6]); // Monday and Tuesday
                Assert.Equal(env.DeferrableRemainingKwh[m] / 10.0, x[7], 1e-6);
                Assert.Equal((float)env.FlexMinKw[m], lo[m]);
                Assert.Equal((float)env.FlexDesiredKw[m], hi[m]);
                Assert.InRange(x[9], -1f, 1.5f);
                // A fixed mix: a quarter of the way into the box (float rounding is clamped by the task).
                act[m] = lo[m] + 0.25f * (hi[m] - lo[m]);
                setpoints[m] = Math.Clamp((double)act[m], env.FlexMinKw[m], env.FlexDesiredKw[m]);
            }
            bool dayOver = task.Step(act, cost);
            env.Step(setpoints, r);
            for (int m = 0; m < n; m++)
                Assert.Equal(r.BillDollars[m] + r.DiscomfortDollars[m], cost[m], 1e-5);
            Assert.Equal(r.SubstationImportKw, task.LastStep.SubstationImportKw, 9);
            Assert.Equal((t + 1) % 96 == 0, dayOver);
            if (dayOver)
            {
                dayEnds++;
                Assert.Equal(dayEnds, task.LastDay!.Day);
                if (!task.HorizonOver) task.NextDay();
            }
        }
        Assert.Equal(2, dayEnds);
        Assert.True(task.HorizonOver);
    }

    [Fact]
    public void Day_metrics_add_up_the_slots()
    {
        var task = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false));
        int n = task.AgentCount;
        float[] lo = new float[n], hi = new float[n], cost = new float[n];
        double bill = 0, discomfort = 0, peak = 0;
        int violations = 0;
        bool over = false;
        while (!over)
        {
            task.GetBounds(lo, hi);
            over = task.Step(hi, cost);
            bill += task.LastStep.TotalBillDollars;
            discomfort += task.LastStep.TotalDiscomfortDollars;
            peak = Math.Max(peak, task.LastStep.SubstationImportKw);
            if (task.LastStep.ViolationCount > 0) violations++;
        }
        DayMetrics d = task.LastDay!;
        Assert.Equal(bill, d.Bill, 9);
        Assert.Equal(discomfort, d.Discomfort, 9);
        Assert.Equal(bill + discomfort, d.Cost, 9);
        Assert.Equal(peak, d.PeakKw, 9);
        Assert.Equal(violations, d.ViolationSlots);
        Assert.Equal(0, d.Projections);
        // Without projection, proposing the desired power is the no-control baseline: same figures as PolicyRun.
        DayMetrics nc = NoControlBaseline.Run(TwoDays)[0];
        Assert.Equal(nc.Cost, d.Cost, 6);
        Assert.Equal(nc.PeakKw, d.PeakKw, 6);
        Assert.Equal(nc.ViolationSlots, d.ViolationSlots);
    }

    [Fact]
    public void Projection_removes_the_overloads_of_no_control_proposals()
    {
        // Without control the evening peak breaks the 130 kW substation limit (README, default scenario).
        var baseline = NoControlBaseline.Run(TwoDays);
        Assert.True(baseline.Sum(d => d.ViolationSlots) > 0);
        var task = new HouseholdControlTask(TwoDays);
        int n = task.AgentCount;
        float[] lo = new float[n], hi = new float[n], cost = new float[n];
        var days = new List<DayMetrics>();
        int projected = 0;
        while (!task.HorizonOver)
        {
            task.GetBounds(lo, hi);
            bool over = task.Step(hi, cost);
            ProjectionResult p = task.LastProjection!;
            if (p.Status == ProjectionStatus.Projected)
            {
                projected++;
                Assert.Equal(0, task.LastStep.ViolationCount);
                Assert.True(task.LastStep.SubstationImportKw <= TwoDays.Feeder.Substation.ImportLimitKw + 1e-3);
                for (int m = 0; m < n; m++) Assert.InRange(p.SetpointKw[m], lo[m] - 1e-4, hi[m] + 1e-4);
            }
            else if (p.Status == ProjectionStatus.AlreadyFeasible)
            {
                Assert.Equal(0, task.LastStep.ViolationCount);
            }
            if (over)
            {
                days.Add(task.LastDay!);
                if (!task.HorizonOver) task.NextDay();
            }
        }
        Assert.True(projected > 0);
        Assert.Equal(projected + days.Sum(d => d.ProjectionTrouble.Unverified), days.Sum(d => d.Projections));
        // Every slot left with a violation is one whose projection is on record as not verified.
        int trouble = days.Sum(d => d.ProjectionTrouble.Unverified + d.ProjectionTrouble.Infeasible + d.ProjectionTrouble.SolverFailures);
        Assert.True(days.Sum(d => d.ViolationSlots) <= trouble);
    }

    [Fact]
    public void Reset_rewinds_to_the_first_day_and_NextDay_refuses_a_day_in_progress()
    {
        var task = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false));
        int n = task.AgentCount, k = task.StateSizePerAgent;
        float[] first = new float[n * k], again = new float[n * k], lo = new float[n], hi = new float[n], cost = new float[n];
        task.Observe(first);
        task.GetBounds(lo, hi);
        task.Step(hi, cost);
        Assert.Throws<InvalidOperationException>(task.NextDay);
        task.Reset(123);
        task.Observe(again);
        Assert.Equal(first, again);
        Assert.Equal(0, task.Day);
    }

    [Fact]
    public void A_slot_with_projection_allocates_nothing_after_warm_up()
    {
        var task = new HouseholdControlTask(TwoDays);
        int n = task.AgentCount;
        float[] state = new float[n * task.StateSizePerAgent], lo = new float[n], hi = new float[n], cost = new float[n];
        for (int t = 0; t < 4; t++)
        {
            task.Observe(state);
            task.GetBounds(lo, hi);
            task.Step(hi, cost);
        }
        long before = GC.GetAllocatedBytesForCurrentThread();
        for (int t = 4; t < 95; t++) // the rest of day 1 up to (not including) its last slot, which writes the day's record
        {
            task.Observe(state);
            task.GetBounds(lo, hi);
            task.Step(hi, cost); // desired power: the evening peak needs projections
        }
        Assert.Equal(0, GC.GetAllocatedBytesForCurrentThread() - before);
    }

    [Fact]
    public void Look_ahead_features_follow_the_published_time_of_use_schedule()
    {
        // Default scenario's weekday schedule (README, invented tariff): off-peak 0.10 $/kWh 22:00-07:00,
        // shoulder 0.18 07:00-16:00, peak 0.38 16:00-22:00; Monday is day 0.
        var task = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false));
        int n = task.AgentCount, k = task.StateSizePerAgent;
        float[] state = new float[n * k], lo = new float[n], hi = new float[n], cost = new float[n];
        for (int t = 0; t <= 64; t++)
        {
            task.Observe(state);
            if (t == 0)
            {
                // 00:00, off-peak: the next 12 h reach the shoulder at 07:00, never the peak.
                Assert.Equal(0f, state[10], 1e-6);
                Assert.Equal((0.18 - 0.10) / 0.25, state[11], 1e-6);
                Assert.Equal(7.0 / 12.0, state[12], 1e-6);
            }
            if (t == 64)
            {
                // 16:00, peak: off-peak from 22:00 lies within 12 h; the price changes in 6 h.
                Assert.Equal((0.38 - 0.10) / 0.25, state[10], 1e-6);
                Assert.Equal(0f, state[11], 1e-6);
                Assert.Equal(6.0 / 12.0, state[12], 1e-6);
                break;
            }
            task.GetBounds(lo, hi);
            task.Step(hi, cost);
        }
    }

    [Fact]
    public void Charging_urgency_is_energy_left_over_what_full_power_delivers_before_departure()
    {
        var task = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false));
        DemandResponseEnvironment env = task.Environment;
        int n = task.AgentCount, k = task.StateSizePerAgent, checkedSlots = 0;
        float[] state = new float[n * k], lo = new float[n], hi = new float[n], cost = new float[n];
        for (int t = 0; t < TwoDays.SlotCount; t++)
        {
            task.Observe(state);
            for (int m = 0; m < n; m++)
            {
                ChargingSession? session = env.CurrentSession(m);
                if (session is null)
                {
                    Assert.Equal(0f, state[m * k + 13]);
                    continue;
                }
                double maxKw = TwoDays.Households[m].Deferrable!.MaxKw;
                double expected = env.DeferrableRemainingKwh[m] / ((session.DeadlineSlot - t) * 0.25 * maxKw);
                Assert.Equal(Math.Min(expected, 2), state[m * k + 13], 1e-5);
                Assert.InRange(state[m * k + 13], 0f, 1.0001f); // the deadline rule keeps every session finishable
                checkedSlots++;
            }
            task.GetBounds(lo, hi);
            task.Step(lo, cost); // minimum: sessions run up to their deadlines
        }
        Assert.True(checkedSlots > 100);
    }

    [Fact]
    public void Shaped_costs_add_the_discounted_change_of_the_energy_owed_and_keep_the_true_day_figures()
    {
        const double gamma = 0.95;
        var plain = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false));
        var shaped = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false, ShapingDiscount: gamma));
        int n = plain.AgentCount;
        float[] lo = new float[n], hi = new float[n], act = new float[n], c = new float[n], cs = new float[n];
        double[] before = new double[n], after = new double[n];
        bool over = false;
        int t = 0;
        while (!over)
        {
            plain.GetBounds(lo, hi);
            for (int m = 0; m < n; m++) act[m] = (t / 8 + m) % 2 == 0 ? lo[m] : hi[m];
            shaped.EnergyOwedDollars(before);
            plain.Step(act, c);
            over = shaped.Step(act, cs);
            shaped.EnergyOwedDollars(after);
            for (int m = 0; m < n; m++)
                Assert.Equal(c[m] + gamma * after[m] - before[m], cs[m], 1e-4);
            t++;
        }
        Assert.Equal(plain.LastDay!.Cost, shaped.LastDay!.Cost, 9);
    }

    [Fact]
    public void Undiscounted_shaping_shifts_every_policy_by_the_same_amount_so_rankings_hold()
    {
        // Ng, Harada & Russell (1999): with gamma = 1 the shaped return of any policy over the whole horizon is its true
        // cost minus the starting potential (the potential is 0 once the horizon is over).
        double Total(bool shape, Func<float, float, int, float> policy, out double trueCost)
        {
            var task = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false, ShapingDiscount: shape ? 1.0 : null));
            int n = task.AgentCount;
            float[] lo = new float[n], hi = new float[n], act = new float[n], cost = new float[n];
            double total = 0;
            trueCost = 0;
            for (int t = 0; t < TwoDays.SlotCount; t++)
            {
                task.GetBounds(lo, hi);
                for (int m = 0; m < n; m++) act[m] = policy(lo[m], hi[m], t);
                bool over = task.Step(act, cost);
                for (int m = 0; m < n; m++) total += cost[m];
                trueCost += task.LastStep.TotalBillDollars + task.LastStep.TotalDiscomfortDollars;
                if (over && !task.HorizonOver) task.NextDay();
            }
            return total;
        }
        var start = new HouseholdControlTask(TwoDays, new HouseholdTaskOptions(Project: false));
        double[] owed0 = new double[start.AgentCount];
        start.EnergyOwedDollars(owed0);
        Func<float, float, int, float> desired = (lo, hi, _) => hi, minimum = (lo, _, _) => lo,
            offPeak = (lo, hi, t) => t % 96 < 28 ? hi : lo;
        double trueA, trueB, trueC;
        double a = Total(true, desired, out trueA), b = Total(true, minimum, out trueB), cc = Total(true, offPeak, out trueC);
        Assert.Equal(trueA - owed0.Sum(), a, 0.05);
        Assert.Equal(trueB - owed0.Sum(), b, 0.05);
        Assert.Equal(trueC - owed0.Sum(), cc, 0.05);
        Assert.Equal(trueA.CompareTo(trueB), a.CompareTo(b));
        Assert.Equal(trueB.CompareTo(trueC), b.CompareTo(cc));
    }
}
