namespace FedGrid.Audit.Attacks;

/// <summary>
/// The honest-but-curious coordinator: runs every attack that applies to an <see cref="AttackerView"/>, then the
/// joint fusion and the occupancy inference. It sees only the view.
/// </summary>
public static class Auditor
{
    /// <summary>Runs all attacks.</summary>
    /// <param name="view">What the coordinator holds.</param>
    /// <param name="options">Declared side information; null for all of it.</param>
    /// <param name="extraAttacks">Further attacks supplied by the caller (run after the built-in ones, before the joint fusion); null for none.</param>
    /// <returns>Reconstructions, identifiability figures, occupancy guesses and notes.</returns>
    public static AttackResults Attack(AttackerView view, AttackOptions? options = null, IReadOnlyList<IViewAttack>? extraAttacks = null)
    {
        ArgumentNullException.ThrowIfNull(view);
        options ??= new AttackOptions();
        var recs = new List<Reconstruction>();
        var ident = new List<Identifiability>();
        var notes = new List<string>();
        PartialSumInversion.Run(view, options, recs, ident);
        SubspaceAttack.Run(view, options, recs, ident, notes);
        UploadRatioAttack.Run(view, options, recs, ident, notes);
        ProjectionInputAttack.Run(view, options, recs);
        PhysicalFloorAttack.Run(view, options, recs, notes);
        foreach (IViewAttack extra in extraAttacks ?? []) extra.Run(view, options, recs, ident, notes);
        List<Reconstruction> joint = JointAttack.Fuse(view, options, recs);
        recs.AddRange(joint);
        var occ = new List<OccupancyGuess>();
        var prior = new List<OccupancyGuess>();
        foreach (Reconstruction j in joint)
        {
            if (j.Quantity != Quantity.BaseLoad) continue;
            if (OccupancyAttack.Infer(view, j) is { } g) occ.Add(g);
            if (OccupancyAttack.PriorGuess(view, j.Household) is { } p) prior.Add(p);
        }
        return new AttackResults(recs, ident, occ, prior, notes);
    }
}
