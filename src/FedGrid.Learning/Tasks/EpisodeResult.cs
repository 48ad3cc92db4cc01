namespace FedGrid.Learning.Tasks;

/// <summary>Outcome of one episode on an <see cref="IControlTask"/>.</summary>
/// <param name="TotalCost">Undiscounted cost summed over agents and steps.</param>
/// <param name="Steps">Decision steps taken.</param>
/// <param name="Updates">Learning updates made during the episode (0 when not training).</param>
public sealed record EpisodeResult(double TotalCost, int Steps, int Updates)
{
    /// <summary>Total cost per decision step.</summary>
    public double MeanCostPerStep => Steps == 0 ? 0 : TotalCost / Steps;
}
