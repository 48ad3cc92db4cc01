namespace FedGrid.Bench.Versus;

/// <summary>Every side-by-side case, in the order printed. Add one line per case family.</summary>
internal static class VersusCases
{
    public static IEnumerable<IVersusCase> All()
    {
        foreach (IVersusCase c in PowerFlowVersusCase.All()) yield return c;
        foreach (IVersusCase c in ProjectionVersusCase.All()) yield return c;
        yield return new HostingVersusCase();
        foreach (IVersusCase c in FederatedRunVersusCases.All()) yield return c;
    }
}
