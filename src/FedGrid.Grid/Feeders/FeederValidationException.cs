namespace FedGrid.Grid.Feeders;

/// <summary>One problem found in a feeder description.</summary>
/// <param name="Location">Where: a JSON path such as <c>$.lines[3].to</c>, prefixed by the file name when known.</param>
/// <param name="Message">What is wrong, in words.</param>
public sealed record FeederProblem(string Location, string Message)
{
    /// <inheritdoc />
    public override string ToString() => $"{Location}: {Message}";
}

/// <summary>A feeder description that cannot be used; lists every problem found.</summary>
public sealed class FeederValidationException : Exception
{
    /// <summary>Creates the exception from the problems found.</summary>
    public FeederValidationException(IReadOnlyList<FeederProblem> problems)
        : base(Format(problems)) => Problems = problems;

    /// <summary>The problems, in the order found.</summary>
    public IReadOnlyList<FeederProblem> Problems { get; }

    private static string Format(IReadOnlyList<FeederProblem> problems) =>
        problems.Count == 1
            ? $"invalid feeder: {problems[0]}"
            : $"invalid feeder ({problems.Count} problems):{Environment.NewLine}  " +
              string.Join(Environment.NewLine + "  ", problems);
}
