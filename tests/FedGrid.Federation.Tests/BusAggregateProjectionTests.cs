using FedGrid.Federation.Households;
using FedGrid.Federation.Privacy;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Federation.Transcripts;
using FedGrid.Federation.Wire;
using FedGrid.Grid.Feeders;
using FedGrid.Grid.PowerFlow;
using FedGrid.Grid.Projection;
using FedGrid.Households.Scenarios;

namespace FedGrid.Federation.Tests;

public sealed class BusAggregateProjectionTests
{
    private sealed record Step(double[] ProposalKw, double[] MinKw, double[] MaxKw, double[] BaseKw);

    private sealed record Outcome(double[] SetpointKw, ProjectionResult Result, List<HouseholdMessage> Inputs);

    /// <summary>One projection exchange driven through a form's two sides, message by message (as the coordinator and agents do).</summary>
    private static Outcome Exchange(IProjectionInputsForm form, Feeder feeder, string[] buses, double[] tanPhi,
        IReadOnlyList<(string, double, double)> fixedLoads, Step s)
    {
        int n = buses.Length;
        var sides = new IHouseholdProjectionSide[n];
        var registered = new RegisteredHousehold[n];
        for (int m = 0; m < n; m++)
        {
            sides[m] = form.CreateHouseholdSide(0x1000UL + (ulong)m);
            var join = new JoinRequest { HouseholdId = $"h{m}", BusId = buses[m], TanPhi = tanPhi[m] };
            sides[m].WriteJoin(join);
            registered[m] = new RegisteredHousehold(m, join.HouseholdId, buses[m], tanPhi[m],
                join.ProjectionPublicKey.IsEmpty ? null : join.ProjectionPublicKey.ToByteArray());
        }
        ICoordinatorProjectionSide coordinator = form.CreateCoordinatorSide(feeder, registered, fixedLoads, null);
        for (int m = 0; m < n; m++)
        {
            var setup = new CoordinatorMessage();
            if (coordinator.TryWriteSetup(m, setup))
                Assert.True(sides[m].TryReadSetup(m, setup.Clone()));
        }
        coordinator.Begin();
        var inputs = new List<HouseholdMessage>();
        for (int m = 0; m < n; m++)
        {
            var msg = new HouseholdMessage { HouseholdIndex = m };
            sides[m].WriteInputs(0, 3, s.ProposalKw[m], s.MinKw[m], s.MaxKw[m], s.BaseKw[m], msg);
            inputs.Add(msg.Clone());
            Assert.True(coordinator.TryAdd(m, msg));
        }
        ProjectionResult result = coordinator.Project();
        var setpoints = new double[n];
        for (int m = 0; m < n; m++)
        {
            var reply = new CoordinatorMessage();
            coordinator.WriteReply(m, 0, 3, reply);
            Assert.True(sides[m].TryReadSetpoint(reply, s.MinKw[m], s.MaxKw[m], out setpoints[m], out int round, out long step));
            Assert.Equal((0, 3L), (round, step));
        }
        return new Outcome(setpoints, result, inputs);
    }

    /// <summary>An evening that overloads the default feeder: every household at a high base load, proposing its whole desired power.</summary>
    private static (Scenario Scenario, Step Step, double[] TanPhi, (string, double, double)[] Fixed) Overload()
    {
        Scenario sc = TestRuns.Default();
        int n = sc.Households.Length;
        var step = new Step(new double[n], new double[n], new double[n], new double[n]);
        for (int m = 0; m < n; m++)
        {
            step.MinKw[m] = 0.2 + 0.05 * (m % 3);
            step.MaxKw[m] = 6 + 0.5 * (m % 5);
            step.ProposalKw[m] = step.MaxKw[m] - 0.3 * (m % 2);
            step.BaseKw[m] = 2.0 + 0.1 * (m % 7);
        }
        return (sc, step, sc.Households.Select(h => h.KvarPerKw).ToArray(), sc.FixedLoads.Select(f => (f.BusId, f.Kw, f.Kvar)).ToArray());
    }

    [Fact]
    public void Default_scenario_has_households_sharing_buses()
    {
        // DESIGN.md §2: several households on one bus is the normal case, and the default scenario has it; otherwise the
        // tests below would not exercise the masking.
        Scenario sc = TestRuns.Default();
        Assert.Contains(sc.Households.GroupBy(h => h.BusId), g => g.Count() >= 2);
    }

    [Fact]
    public void Bus_level_projection_passes_the_exact_AC_check_and_household_setpoints_stay_in_their_boxes()
    {
        var (sc, step, tan, fixedLoads) = Overload();
        string[] buses = sc.Households.Select(h => h.BusId).ToArray();
        Outcome o = Exchange(new BusAggregateProjectionInputs(), sc.Feeder, buses, tan, fixedLoads, step);
        Assert.Equal(ProjectionStatus.Projected, o.Result.Status);
        Assert.True(o.Result.AcVerified);
        Assert.True(o.Result.MaxVoltageViolationPuBefore > 0.001, $"the stress case violates by {o.Result.MaxVoltageViolationPuBefore} pu only");
        int n = buses.Length;
        for (int m = 0; m < n; m++)
            Assert.InRange(o.SetpointKw[m], step.MinKw[m], step.MaxKw[m]);
        // Each bus's applied total is the projected bus setpoint (units in order of first appearance of a bus).
        string[] units = buses.Distinct().ToArray();
        for (int u = 0; u < units.Length; u++)
        {
            double applied = Enumerable.Range(0, n).Where(m => buses[m] == units[u]).Sum(m => o.SetpointKw[m]);
            Assert.Equal(o.Result.SetpointKw[u], applied, 6);
        }
        // Independent exact AC power flow at the households' own setpoints and own tan φ (the projection modelled each bus's
        // flexible load at the bus's largest tan φ, an upper bound of its reactive load): no limit violated.
        Feeder f = sc.Feeder;
        double perUnit = 1.0 / (f.BaseMva * 1000);
        var p = new double[f.Network.BusCount];
        var q = new double[f.Network.BusCount];
        foreach (var (bus, kw, kvar) in fixedLoads) { p[f.IndexOf(bus)] += kw * perUnit; q[f.IndexOf(bus)] += kvar * perUnit; }
        for (int m = 0; m < n; m++)
        {
            int b = f.IndexOf(buses[m]);
            p[b] += (step.BaseKw[m] + o.SetpointKw[m]) * perUnit;
            q[b] += (step.BaseKw[m] + o.SetpointKw[m]) * tan[m] * perUnit;
        }
        var flow = new PowerFlowResult(f.Network.BusCount);
        Assert.True(new AcPowerFlow(f.Network).Solve(p, q, flow));
        Assert.Empty(flow.FindViolations(f, 1e-5));
    }

    [Fact]
    public void With_one_household_per_bus_it_equals_the_per_household_projection()
    {
        var (sc, step, tan, fixedLoads) = Overload();
        // Every household on a bus of its own: as many households as the feeder has buses besides the substation's, doubled
        // in load so that the feeder still overloads.
        string slack = sc.Feeder.Substation.SlackBus;
        string[] buses = sc.Feeder.Buses.Select(b => b.Id).Where(id => id != slack).ToArray();
        int n = buses.Length;
        step = new Step(step.ProposalKw[..n].Select(x => 2 * x).ToArray(), step.MinKw[..n], step.MaxKw[..n].Select(x => 2 * x).ToArray(), step.BaseKw[..n].Select(x => 2 * x).ToArray());
        tan = tan[..n];
        Outcome bus = Exchange(new BusAggregateProjectionInputs(), sc.Feeder, buses, tan, fixedLoads, step);
        Outcome household = Exchange(new HouseholdProjectionInputs(), sc.Feeder, buses, tan, fixedLoads, step);
        Assert.Equal(household.Result.Status, bus.Result.Status);
        Assert.Equal(ProjectionStatus.Projected, bus.Result.Status);
        // Equal up to the fixed-point resolution of the shares (2^-24 kW) propagated through the solve.
        for (int m = 0; m < buses.Length; m++)
            Assert.Equal(household.SetpointKw[m], bus.SetpointKw[m], 5);
        Assert.Contains(bus.SetpointKw.Zip(step.ProposalKw), z => z.First < z.Second - 0.01);
    }

    [Fact]
    public void A_single_share_on_a_shared_bus_reveals_nothing_but_the_bus_sum_is_exact()
    {
        var (sc, step, tan, fixedLoads) = Overload();
        string[] buses = sc.Households.Select(h => h.BusId).ToArray();
        Outcome o = Exchange(new BusAggregateProjectionInputs(), sc.Feeder, buses, tan, fixedLoads, step);
        var encoding = new FixedPointEncoding(BusAggregateProjectionInputs.DefaultMaxAbsKw, 1);
        string shared = buses.GroupBy(b => b).First(g => g.Count() >= 2).Key;
        int[] members = Enumerable.Range(0, buses.Length).Where(m => buses[m] == shared).ToArray();
        foreach (int m in members)
        {
            // A masked residue decodes to a value far from the household's base load (uniform on the ring: |decoded| < 1 kW
            // has probability about 2^-39).
            double decoded = encoding.Decode(o.Inputs[m].BusShares.Masked[3]);
            Assert.True(Math.Abs(decoded - step.BaseKw[m]) > 1, $"household {m}'s share decodes to {decoded}");
        }
        ulong sum = 0;
        foreach (int m in members) sum = unchecked(sum + o.Inputs[m].BusShares.Masked[3]);
        Assert.Equal(members.Sum(m => step.BaseKw[m]), encoding.Decode(sum), 6);
    }

    [Fact]
    public void Correction_round_trips_a_bus_total_and_stays_inside_each_box()
    {
        // Two households: boxes [1, 5] and [0, 2], proposals 4 and 1 (bus total 5, box [1, 7]).
        double[] min = [1, 0], max = [5, 2], p = [4, 1];
        foreach (double target in new[] { 1.0, 2.5, 5.0, 6.0, 7.0 })
        {
            double f = BusAggregateProjectionInputs.Correction(target, p.Sum(), min.Sum(), max.Sum());
            double[] s = [.. Enumerable.Range(0, 2).Select(m => BusAggregateProjectionInputs.ApplyCorrection(f, p[m], min[m], max[m]))];
            Assert.Equal(target, s.Sum(), 12);
            for (int m = 0; m < 2; m++) Assert.InRange(s[m], min[m], max[m]);
        }
    }

    [Fact]
    public void Federated_run_with_bus_aggregate_inputs_sends_only_masked_shares_and_keeps_setpoints_in_boxes()
    {
        var sink = new RecordingTranscript();
        Scenario sc = TestRuns.Default();
        var run = new InProcessFederation(sc, new FederatedRunOptions
        {
            Scheme = ClearScheme.Plain(),
            Federation = TestRuns.Options(stepsPerRound: 4),
            ProjectionForm = new BusAggregateProjectionInputs(),
        }, sink);
        run.Start();
        for (int k = 0; k < 8; k++)
        {
            double[] min = run.World.Environment.FlexMinKw.ToArray(), des = run.World.Environment.FlexDesiredKw.ToArray();
            Assert.True(run.StepOnce());
            for (int m = 0; m < sc.Households.Length; m++)
                Assert.InRange(run.Households[m].Setpoint, min[m], des[m]);
        }
        Assert.DoesNotContain(sink.Records, r => r.Kind() is RecordKind.ProjectionInputs or RecordKind.Setpoint);
        Assert.Equal(8 * sc.Households.Length, sink.Records.Count(r => r.Kind() == RecordKind.BusShares));
        Assert.Equal(sc.Households.Length, sink.Records.Count(r => r.Kind() == RecordKind.BusPeers));
        Assert.Equal(2, run.Coordinator.AggregatedRounds);
    }

    [Fact]
    public void Household_decision_step_with_masked_bus_shares_allocates_nothing_after_warm_up()
    {
        var run = new InProcessFederation(TestRuns.Default(), new FederatedRunOptions
        {
            Scheme = ClearScheme.Plain(), Federation = TestRuns.Options(), ProjectionForm = new BusAggregateProjectionInputs(),
        }, new RecordingTranscript());
        run.Start(); // admission, bus peers and key agreement
        HouseholdAgent agent = run.Households[3];
        var reply = new CoordinatorMessage { HouseholdIndex = 3, Sums = new SumsReply { Kind = SumsKind.Others } };
        reply.Sums.Actor.AddRange(new float[run.Coordinator.ActorShape.FirstLayerSize]);
        reply.Sums.Critic.AddRange(new float[run.Coordinator.CriticShape.FirstLayerSize]);
        var correction = new CoordinatorMessage { HouseholdIndex = 3, BusCorrection = new BusCorrection { Fraction = -0.25 } };
        Assert.Equal(0, TestRuns.AllocatedByDecisionSteps(agent, reply, correction, step => correction.BusCorrection.Step = step));
    }
}
