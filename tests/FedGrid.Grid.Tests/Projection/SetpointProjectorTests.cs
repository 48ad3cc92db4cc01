using FedGrid.Grid.Feeders;
using FedGrid.Grid.Optimization;
using FedGrid.Grid.PowerFlow;
using FedGrid.Grid.Projection;
using FedGrid.TestSupport;

namespace FedGrid.Grid.Tests.Projection;

public class SetpointProjectorTests
{
    private static readonly Feeder Feeder33 = TestFeeders.BaranWu();

    [Fact]
    public void Already_feasible_proposal_is_returned_unchanged_without_a_solve()
    {
        var set = SyntheticUnitSet.Draw(Feeder33, 3);
        var input = set.Input;
        for (int u = 0; u < input.ProposalKw.Length; u++) input.ProposalKw[u] = input.MinKw[u];
        var projector = new SetpointProjector(Feeder33, set.Units);
        var r = projector.Project(input);
        Assert.Equal(ProjectionStatus.AlreadyFeasible, r.Status);
        Assert.Equal(0, r.Attempts);
        Assert.Equal(0, r.Iterations);
        Assert.True(r.AcVerified);
        Assert.Equal(input.ProposalKw, r.SetpointKw);
        Assert.Equal(0, r.Objective);
    }

    [Theory]
    [InlineData(1UL)]
    [InlineData(2UL)]
    [InlineData(5UL)]
    public void Overloading_proposal_is_projected_onto_limits_the_exact_AC_flow_confirms(ulong seed)
    {
        var set = SyntheticUnitSet.Draw(Feeder33, seed);
        var projector = new SetpointProjector(Feeder33, set.Units);
        var r = projector.Project(set.Input);
        Assert.Equal(ProjectionStatus.Projected, r.Status);
        Assert.True(r.AcVerified);
        Assert.True(r.MaxVoltageViolationPuBefore > 0.01, $"proposal violates by {r.MaxVoltageViolationPuBefore} pu only");
        Assert.True(r.MaxVoltageViolationPuAfter <= 1e-6);
        Assert.True(r.MaxRelaxationGap < 1e-6, $"relaxation gap {r.MaxRelaxationGap}");
        for (int u = 0; u < set.Units.Count; u++)
            Assert.InRange(r.SetpointKw[u], set.Input.MinKw[u], set.Input.MaxKw[u]);
        // Nearest feasible point: some limit binds in the exact flow (here the lower voltage limit, 0.95 pu).
        Assert.InRange(r.AcFlow.MinVoltagePu, 0.95 - 1e-6, 0.95 + 1e-4);
        // The relaxation's voltages are the AC voltages when the gap is zero.
        for (int i = 0; i < Feeder33.Buses.Count; i++) Assert.Equal(r.AcFlow.VoltagePu[i], r.VoltagePu[i], 6);
        Assert.True(r.Objective > 0);
        Assert.Equal(SolverStatus.Optimal, r.SolverStatus);
    }

    [Fact]
    public void Linearised_formulation_is_verified_after_tightening()
    {
        var set = SyntheticUnitSet.Draw(Feeder33, 1);
        var projector = new SetpointProjector(Feeder33, set.Units, new LinearisedBranchFlowFormulation());
        var r = projector.Project(set.Input);
        Assert.Equal(ProjectionStatus.Projected, r.Status);
        Assert.True(r.AcVerified);
        Assert.True(r.Attempts >= 2, "LinDistFlow ignores losses; the first point should need tightening");
        Assert.Equal(0, r.MaxRelaxationGap);

        // It is conservative against the cone relaxation: never a smaller distance.
        var cone = new SetpointProjector(Feeder33, set.Units).Project(set.Input);
        Assert.True(r.Objective >= cone.Objective * (1 - 1e-6));
    }

    [Fact]
    public void Failed_solve_falls_back_to_every_unit_at_its_minimum_when_that_passes_the_ac_check()
    {
        // Two interior-point iterations cannot finish: the solver stops at its iteration limit.
        var set = SyntheticUnitSet.Draw(Feeder33, 3);
        var starved = new ProjectionOptions(Solver: new SolverOptions(MaxIterations: 2));
        var projector = new SetpointProjector(Feeder33, set.Units, options: starved);
        var r = projector.Project(set.Input);
        Assert.Equal(ProjectionStatus.SolverFailure, r.Status);
        Assert.Equal(SolverStatus.IterationLimit, r.SolverStatus);
        Assert.True(r.FellBackToMinimum);
        Assert.True(r.AcVerified);
        Assert.Equal(set.Input.MinKw, r.SetpointKw);
        Assert.Empty(r.AcFlow.FindViolations(Feeder33));

        // The flag belongs to one projection: the same projector's next, already feasible, call clears it.
        var input = set.Input;
        for (int u = 0; u < input.ProposalKw.Length; u++) input.ProposalKw[u] = input.MinKw[u];
        var next = projector.Project(input);
        Assert.Equal(ProjectionStatus.AlreadyFeasible, next.Status);
        Assert.False(next.FellBackToMinimum);
    }

    [Fact]
    public void Unverified_point_is_reported_with_its_violations_never_silently()
    {
        var set = SyntheticUnitSet.Draw(Feeder33, 1);
        var projector = new SetpointProjector(Feeder33, set.Units, new LinearisedBranchFlowFormulation(), new ProjectionOptions(MaxAttempts: 1));
        var r = projector.Project(set.Input);
        Assert.Equal(ProjectionStatus.Unverified, r.Status);
        Assert.False(r.AcVerified);
        Assert.NotEmpty(r.Violations);
        Assert.All(r.Violations, v => Assert.Equal(ViolationKind.UnderVoltage, v.Kind));
    }

    [Fact]
    public void Base_load_alone_breaking_the_voltage_limit_is_infeasible_with_the_binding_limits_named()
    {
        // The full published load already takes bus 18 to 0.913 pu (Baran & Wu 1989), below 0.95.
        var set = SyntheticUnitSet.Draw(Feeder33, 4, baseShare: 1.0, overload: 0.2);
        var projector = new SetpointProjector(Feeder33, set.Units);
        var r = projector.Project(set.Input);
        Assert.Equal(ProjectionStatus.Infeasible, r.Status);
        Assert.Equal(SolverStatus.PrimalInfeasible, r.SolverStatus);
        Assert.Contains(r.BindingLimits, s => s.StartsWith("voltage lower limit at bus", StringComparison.Ordinal));
        Assert.False(r.AcVerified);
        Assert.Equal(set.Input.ProposalKw, r.SetpointKw);
    }

    [Fact]
    public void Substation_import_limit_binds_when_it_is_the_tightest()
    {
        var feeder = TestFeeders.BaranWu(vMin: 0.85, importKwPerCopy: 2500);
        var set = SyntheticUnitSet.Draw(feeder, 9);
        var r = new SetpointProjector(feeder, set.Units).Project(set.Input);
        Assert.Equal(ProjectionStatus.Projected, r.Status);
        Assert.InRange(feeder.Network.ToKw(r.AcFlow.SubstationPPu), 2500 - 0.5, 2500 + 1e-3);
    }

    [Fact]
    public void Bus_aggregate_units_plug_in_unchanged()
    {
        // One unit per bus whose box is the sum of that bus's units (the bus-aggregate scheme).
        var set = SyntheticUnitSet.Draw(Feeder33, 1);
        var byBus = set.Units.Select((u, k) => (u, k)).GroupBy(t => t.u.BusId).ToList();
        var agg = byBus.Select(g => new FlexibleUnit($"bus-{g.Key}", g.Key, 0.3, 1)).ToList();
        var input = new ProjectionInput(Feeder33.Buses.Count, agg.Count);
        set.Input.BaseLoadKw.CopyTo(input.BaseLoadKw, 0);
        set.Input.BaseLoadKvar.CopyTo(input.BaseLoadKvar, 0);
        for (int a = 0; a < agg.Count; a++)
        {
            input.MinKw[a] = byBus[a].Sum(t => set.Input.MinKw[t.k]);
            input.MaxKw[a] = byBus[a].Sum(t => set.Input.MaxKw[t.k]);
            input.ProposalKw[a] = input.MaxKw[a];
        }
        var r = new SetpointProjector(Feeder33, agg).Project(input);
        Assert.Equal(ProjectionStatus.Projected, r.Status);
        Assert.True(r.AcVerified);
    }

    [Fact]
    public void Repeated_projection_reuses_buffers_and_allocates_nothing()
    {
        var set = SyntheticUnitSet.Draw(Feeder33, 1);
        var projector = new SetpointProjector(Feeder33, set.Units);
        var result = projector.CreateResult();
        projector.Project(set.Input, result);
        Assert.Equal(ProjectionStatus.Projected, result.Status);
        set.Input.ProposalKw[0] = set.Input.MinKw[0];   // a different slot
        long before = GC.GetAllocatedBytesForCurrentThread();
        projector.Project(set.Input, result);
        long allocated = GC.GetAllocatedBytesForCurrentThread() - before;
        Assert.Equal(ProjectionStatus.Projected, result.Status);
        Assert.Equal(0, allocated);
    }

    [Fact]
    public void Bad_input_names_the_unit_or_bus()
    {
        var set = SyntheticUnitSet.Draw(Feeder33, 1);
        var projector = new SetpointProjector(Feeder33, set.Units);
        string unit = set.Units[2].Id;

        var input = Copy(set.Input);
        input.ProposalKw[2] = double.NaN;
        Assert.Contains($"unit '{unit}'", Assert.Throws<ArgumentException>(() => projector.Project(input)).Message);

        input = Copy(set.Input);
        input.ProposalKw[2] = input.MaxKw[2] + 1;
        Assert.Contains("outside its box", Assert.Throws<ArgumentException>(() => projector.Project(input)).Message);

        input = Copy(set.Input);
        input.MinKw[2] = -1;
        Assert.Contains("negative", Assert.Throws<ArgumentException>(() => projector.Project(input)).Message);

        input = Copy(set.Input);
        input.BaseLoadKw[17] = double.PositiveInfinity;
        Assert.Contains($"bus '{Feeder33.Buses[17].Id}'", Assert.Throws<ArgumentException>(() => projector.Project(input)).Message);

        var shorter = new ProjectionInput(Feeder33.Buses.Count, set.Units.Count - 1);
        Assert.Contains($"expected {set.Units.Count} flexible units", Assert.Throws<ArgumentException>(() => projector.Project(shorter)).Message);

        var e = Assert.Throws<ArgumentException>(() => new SetpointProjector(Feeder33, [new FlexibleUnit("ev-1", "99")]));
        Assert.Contains("'ev-1'", e.Message);
        Assert.Contains("'99'", e.Message);
    }

    private static ProjectionInput Copy(ProjectionInput s)
    {
        var c = new ProjectionInput(s.BaseLoadKw.Length, s.MinKw.Length);
        s.BaseLoadKw.CopyTo(c.BaseLoadKw, 0);
        s.BaseLoadKvar.CopyTo(c.BaseLoadKvar, 0);
        s.MinKw.CopyTo(c.MinKw, 0);
        s.MaxKw.CopyTo(c.MaxKw, 0);
        s.ProposalKw.CopyTo(c.ProposalKw, 0);
        return c;
    }
}

public class WarmStartTests
{
    [Fact]
    public void Warm_started_slots_give_the_cold_start_setpoints_in_fewer_iterations()
    {
        var feeder = FedGrid.TestSupport.TestFeeders.BaranWu();
        var set = SyntheticUnitSet.Draw(feeder, 1);
        var b = new ProjectionInput(feeder.Buses.Count, set.Units.Count);
        set.Input.BaseLoadKw.CopyTo(b.BaseLoadKw, 0);
        set.Input.BaseLoadKvar.CopyTo(b.BaseLoadKvar, 0);
        set.Input.MinKw.CopyTo(b.MinKw, 0);
        set.Input.MaxKw.CopyTo(b.MaxKw, 0);
        for (int u = 0; u < set.Units.Count; u++) b.ProposalKw[u] = set.Input.MinKw[u] + 0.85 * (set.Input.MaxKw[u] - set.Input.MinKw[u]);
        var warm = new SetpointProjector(feeder, set.Units);
        var cold = new SetpointProjector(feeder, set.Units, options: new ProjectionOptions(Solver: new FedGrid.Grid.Optimization.SolverOptions()));
        warm.Project(set.Input);
        int warmIterations = 0, coldIterations = 0;
        foreach (var input in new[] { b, set.Input, b })
        {
            var rw = warm.Project(input);
            var rc = cold.Project(input);
            Assert.Equal(ProjectionStatus.Projected, rw.Status);
            Assert.Equal(ProjectionStatus.Projected, rc.Status);
            for (int u = 0; u < set.Units.Count; u++) Assert.Equal(rc.SetpointKw[u], rw.SetpointKw[u], 4);
            warmIterations += rw.Iterations;
            coldIterations += rc.Iterations;
        }
        Assert.True(warmIterations < coldIterations, $"warm {warmIterations} vs cold {coldIterations} iterations");
    }
}

public class KktFillTests
{
    [Fact]
    public void Feeder_KKT_factor_grows_linearly_with_the_feeder()
    {
        // Minimum degree on the (nearly tree-shaped) branch flow KKT system: the factor's size per
        // bus must not grow with the feeder, i.e. the fill stays O(n).
        double PerBus(int copies)
        {
            var feeder = FedGrid.TestSupport.TestFeeders.BaranWu(copies);
            var set = SyntheticUnitSet.Draw(feeder, 1);
            var projector = new SetpointProjector(feeder, set.Units);
            var s = projector.Solver;
            int offDiagonal = s.KktNonZeros - s.KktSize;
            Assert.True(s.FactorNonZeros <= 2.0 * offDiagonal, $"L has {s.FactorNonZeros} entries for {offDiagonal} off-diagonal KKT entries");
            return (double)s.FactorNonZeros / feeder.Buses.Count;
        }
        double small = PerBus(1), large = PerBus(10);
        Assert.InRange(large / small, 0.8, 1.2);
    }
}
