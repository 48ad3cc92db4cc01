using FedGrid.Grid.Feeders;

namespace FedGrid.Grid.Tests;

public sealed class FeederValidationTests
{
    private const string File = "bad.json";

    private static IReadOnlyList<FeederProblem> ProblemsOf(string text)
    {
        var e = Assert.Throws<FeederValidationException>(() => FeederFile.Parse(text, File));
        Assert.NotEmpty(e.Problems);
        foreach (FeederProblem p in e.Problems)
            Assert.Contains(p.ToString(), e.Message);
        return e.Problems;
    }

    private static string Edit(string find, string replace)
    {
        string text = FeederFileTests.SmallFeeder;
        Assert.Contains(find, text); // the edit must apply, or the test would test nothing
        return text.Replace(find, replace, StringComparison.Ordinal);
    }

    private static void AssertProblem(string text, string location, string fragment)
    {
        var problems = ProblemsOf(text);
        Assert.True(problems.Any(p => p.Location == $"{File}: {location}" && p.Message.Contains(fragment, StringComparison.Ordinal)),
            $"expected a problem at '{location}' containing '{fragment}', got:\n  " + string.Join("\n  ", problems));
    }

    public static TheoryData<string, string, string, string> Cases => new()
    {
        // edit (find → replace), expected JSON path, expected words
        { "\"to\": \"c\"", "\"to\": \"z\"", "$.lines[1].to", "unknown bus 'z'" },
        { "{\"id\": \"c\"", "{\"id\": \"b\"", "$.buses[2].id", "duplicate bus id 'b' (first defined at $.buses[1])" },
        { "\"ampacityA\": 100}", "\"ampacityA\": 100},\n    {\"from\": \"c\", \"to\": \"a\", \"rOhm\": 1, \"xOhm\": 1, \"ampacityA\": 100}",
            "$.lines[2]", "the feeder is meshed, and only radial feeders are supported" },
        { "\"loadKvar\": 50, \"vMinPu\": 0.95, \"vMaxPu\": 1.05}", "\"loadKvar\": 50, \"vMinPu\": 0.95, \"vMaxPu\": 1.05},\n    {\"id\": \"d\", \"baseKv\": 12.47, \"vMinPu\": 0.95, \"vMaxPu\": 1.05}", "$.buses[3]",
            "bus 'd' is not connected to the substation bus 'a' (island)" },
        { "\"rOhm\": 0.5", "\"rOhm\": 0", "$.lines[0].rOhm", "resistance must be positive" },
        { "\"rOhm\": 0.5", "\"rOhm\": -0.5", "$.lines[0].rOhm", "resistance must be positive" },
        { "\"xOhm\": 0.8", "\"xOhm\": -0.8", "$.lines[0].xOhm", "reactance must be non-negative" },
        { "\"substation\": {\"bus\": \"a\", \"voltagePu\": 1.02, \"importLimitKw\": 900},", "", "$.substation", "the feeder has no substation" },
        { "{\"bus\": \"a\"", "{\"bus\": \"q\"", "$.substation.bus", "substation bus 'q' is not a bus of the feeder" },
        { "\"voltagePu\": 1.02", "\"voltagePu\": 102", "$.substation.voltagePu", "must be in [0.8, 1.2] pu" },
        { "\"loadKw\": 300", "\"loadKw\": 300000000", "$.buses[1].loadKw", "real load must be finite and at most" },
        { "{\"id\": \"b\", \"baseKv\": 12.47", "{\"id\": \"b\", \"baseKv\": 12470", "$.buses[1].baseKv", "base voltage must be in (0, 500] kV" },
        { "\"loadKvar\": 100, \"vMinPu\": 0.95", "\"loadKvar\": 100, \"vMinPu\": 95", "$.buses[1].vMinPu", "lower voltage limit must be in [0.5, 1.5) pu" },
        { "\"ampacityA\": 200", "\"ampacityA\": 0", "$.lines[0].ampacityA", "ampacity must be positive" },
        { "\"baseMva\": 1", "\"baseMva\": -1", "$.baseMva", "power base must be positive" },
        // structure of the file
        { "{\"id\": \"b\", \"baseKv\": 12.47, ", "{\"id\": \"b\", ", "$.buses[1].baseKv", "missing required field 'baseKv'" },
        { "\"rOhm\": 0.4", "\"rOhm\": \"0.4\"", "$.lines[1].rOhm", "expected a number, got a string" },
        { "{\"id\": \"a\"", "{\"id\": 7", "$.buses[0].id", "expected a string, got a number" },
        { "\"ampacityA\": 100}", "\"ampacityA\": 100, \"colour\": \"red\"}", "$.lines[1].colour", "unknown field 'colour'" },
        { "\"version\": 1,", "\"version\": 1, \"author\": \"x\",", "$.author", "unknown field 'author'" },
        { "\"rOhm\": 0.4", "\"rOhm\": 0.4, \"rOhm\": 0.4", "$.lines[1].rOhm", "appears more than once" },
        { "\"fedgrid-feeder\"", "\"some-other-format\"", "$.format", "not a FedGrid feeder file" },
        { "\"version\": 1", "\"version\": 2", "$.version", "unsupported version 2" },
        { "\"version\": 1,", "", "$.version", "missing required field 'version'" },
        { "\"lines\": [", "\"lines\": {\"x\": 1}, \"unused\": [", "$.lines", "expected an array, got an object" },
        { "\"rOhm\": 0.4", "\"rOhm\": 1e400", "$.lines[1].rOhm", "out of range" },
        { "{\"from\": \"a\"", "7, {\"from\": \"a\"", "$.lines[0]", "expected a line object, got a number" },
    };

    [Theory]
    [MemberData(nameof(Cases))]
    public void Each_problem_is_reported_with_file_path_and_words(string find, string replace, string location, string fragment) =>
        AssertProblem(Edit(find, replace), location, fragment);

    [Fact]
    public void Malformed_json_names_line_and_byte()
    {
        // Missing comma after the "format" value: the reader stops at the start of line 3.
        string text = "{\n  \"format\": \"fedgrid-feeder\"\n  \"version\": 1\n}";
        var problems = ProblemsOf(text);
        FeederProblem p = Assert.Single(problems);
        Assert.StartsWith($"{File}: line 3, byte ", p.Location);
        Assert.StartsWith("malformed JSON: ", p.Message);
    }

    [Fact]
    public void Truncated_json_is_reported_not_thrown_raw()
    {
        string text = FeederFileTests.SmallFeeder[..200];
        FeederProblem p = Assert.Single(ProblemsOf(text));
        Assert.Matches(@"^bad\.json: line \d+, byte \d+$", p.Location);
    }

    [Fact]
    public void Top_level_must_be_an_object()
    {
        FeederProblem p = Assert.Single(ProblemsOf("[1, 2]"));
        Assert.Equal($"{File}: $", p.Location);
        Assert.Contains("expected a JSON object", p.Message);
    }

    [Fact]
    public void Every_problem_is_listed_not_only_the_first()
    {
        string text = Edit("\"to\": \"c\"", "\"to\": \"z\"").Replace("\"rOhm\": 0.5", "\"rOhm\": 0", StringComparison.Ordinal);
        var problems = ProblemsOf(text);
        Assert.Contains(problems, p => p.Location == $"{File}: $.lines[1].to");
        Assert.Contains(problems, p => p.Location == $"{File}: $.lines[0].rOhm");
    }

    [Fact]
    public void Feeder_Create_without_file_uses_bare_paths()
    {
        var buses = new[] { new Bus("a", "a", 12.47, 0, 0, 0.95, 1.05), new Bus("b", "b", 12.47, 10, 0, 0.95, 1.05) };
        var e = Assert.Throws<FeederValidationException>(() =>
            Feeder.Create("x", buses, [new Line("a", "b", 0.1, 0.1, 100), new Line("b", "a", 0.1, 0.1, 100)], new Substation("a", 1, 100)));
        Assert.Equal("$.lines[1]", Assert.Single(e.Problems).Location);
    }
}
