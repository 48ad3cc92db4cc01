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
}
