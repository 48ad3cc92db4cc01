using System.CommandLine;

namespace FedGrid.Cli;

/// <summary>An error the user can fix (bad file, bad option); printed without a stack trace, exit code 2.</summary>
internal sealed class UserInputException(string message) : Exception(message);

/// <summary>Runs the command tree, turning known input errors into one-line messages and exit codes.</summary>
internal static class CliRunner
{
    public const int ExitOk = 0;
    public const int ExitFailure = 1;
    public const int ExitBadInput = 2;

    public static async Task<int> RunAsync(RootCommand root, string[] args)
    {
        ParseResult parse = root.Parse(args);
        try
        {
            return await parse.InvokeAsync(new InvocationConfiguration { EnableDefaultExceptionHandler = false });
        }
        catch (Exception e) when (IsUserInput(e))
        {
            Console.Error.WriteLine($"fedgrid: {e.Message}");
            return ExitBadInput;
        }
    }

    private static bool IsUserInput(Exception e) =>
        e is UserInputException or FedGrid.Grid.Feeders.FeederValidationException or FileNotFoundException
            or DirectoryNotFoundException or System.Text.Json.JsonException or FormatException;
}
