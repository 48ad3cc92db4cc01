using System.Text.Json;
using FedGrid.Cli.Commands;

namespace FedGrid.Cli.Tests;

public class TrainCommandTests
{
    private static (int Code, string Out, string Err, string Dir) Run(TrainOptions options)
    {
        string dir = Path.Combine(Path.GetTempPath(), "fedgrid-train-test-" + Guid.NewGuid().ToString("N"));
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        int code = TrainCommand.Run(options with { OutDir = dir }, stdout, stderr);
        return (code, stdout.ToString(), stderr.ToString(), dir);
    }

    [Theory]
    [InlineData("actor-critic", null)]
    [InlineData("q-learning", "real-time")]
    [InlineData("double-q", "time-of-use")]
    public void Json_summary_has_the_contract_fields(string learner, string? tariff)
    {
        var (code, output, err, dir) = Run(new TrainOptions("centralized", learner, Tariff: tariff, Days: 2, Seed: 3, Json: true));
        try
        {
            Assert.Equal(0, code);
            using var doc = JsonDocument.Parse(output); // stdout holds only the JSON
            var root = doc.RootElement;
            foreach (string field in (string[])["finalDailyCost", "noControlDailyCost", "peakReductionPct", "days", "seed", "finalPeakKw",
                         "noControlPeakKw", "violationSlots", "projections", "decisionSteps", "trainingSeconds"])
                Assert.Equal(JsonValueKind.Number, root.GetProperty(field).ValueKind);
            foreach (string field in (string[])["oracleDailyCost", "savingsCapturedPct", "daysToNinetyPct"])
                Assert.True(root.TryGetProperty(field, out var v) && v.ValueKind is JsonValueKind.Number or JsonValueKind.Null, field);
            Assert.Equal(learner, root.GetProperty("learner").GetString());
            Assert.Equal("centralized", root.GetProperty("mode").GetString());
            // No differential privacy in the centralized mode: the bound is null, not absent.
            Assert.Equal(JsonValueKind.Null, root.GetProperty("epsilon").ValueKind);
            Assert.Equal(JsonValueKind.Null, root.GetProperty("delta").ValueKind);
            Assert.Equal(2, root.GetProperty("days").GetInt32());
            Assert.Equal(3UL, root.GetProperty("seed").GetUInt64());
            Assert.Contains(tariff == "real-time" ? "real-time" : "time-of-use", root.GetProperty("tariff").GetString());
            Assert.Equal(learner == "actor-critic", root.TryGetProperty("warmStartDays", out var warm));
            if (learner == "actor-critic") Assert.Equal(1, warm.GetInt32());
            Assert.Equal(learner == "actor-critic", root.TryGetProperty("warmStartRule", out var rule));
            if (learner == "actor-critic") Assert.Equal("cheapest-period", rule.GetString());
            Assert.Equal(0, root.GetProperty("evaluationDays").GetInt32());
            Assert.Contains($"train: {learner}: day 2/2", err);
            Assert.Equal(output.Trim(), File.ReadAllText(Path.Combine(dir, "summary.json")).Trim());
            string[] daily = File.ReadAllLines(Path.Combine(dir, "daily.csv"));
            Assert.Equal("day,cost,bill,discomfort,peakKw,violationSlots,projections", daily[0]);
            Assert.Equal(3, daily.Length);
            byte[] png = File.ReadAllBytes(Path.Combine(dir, "convergence.png"));
            // PNG signature (ISO/IEC 15948 / W3C PNG, section 5.2).
            Assert.Equal(new byte[] { 0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A }, png[..8]);
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Text_output_shows_the_figures_and_the_cautions()
    {
        var (code, output, _, dir) = Run(new TrainOptions("centralized", "q-learning", Days: 1));
        try
        {
            Assert.Equal(0, code);
            Assert.Contains("Savings captured", output);
            Assert.Contains("Cautions:", output);
            Assert.Contains(dir, output);
        }
        finally { Directory.Delete(dir, true); }
    }

    [Theory]
    [InlineData("gossip", "actor-critic", null, 2, "--mode: unknown mode 'gossip'")]
    [InlineData("centralized", "sarsa", null, 2, "--learner: unknown learner 'sarsa'")]
    [InlineData("centralized", "actor-critic", "flat", 2, "--tariff: unknown tariff 'flat'")]
    [InlineData("centralized", "actor-critic", null, 0, "--days must be between 1 and 366")]
    public void Bad_options_are_user_errors(string mode, string learner, string? tariff, int days, string message)
    {
        var e = Assert.Throws<UserInputException>(() => Run(new TrainOptions(mode, learner, Tariff: tariff, Days: days)));
        Assert.Contains(message, e.Message);
    }

    [Theory]
    [InlineData("centralized", "q-learning", 1, "--warm-start-days applies to --learner actor-critic only")]
    [InlineData("centralized", "actor-critic", -1, "--warm-start-days must be 0 or more, got -1")]
    [InlineData("federated", "actor-critic", -1, "--warm-start-days must be 0 or more, got -1")]
    public void Warm_start_days_only_for_the_actor_critic(string mode, string learner, int warm, string message)
    {
        var e = Assert.Throws<UserInputException>(() => Run(new TrainOptions(mode, learner, Days: 2, WarmStartDays: warm)));
        Assert.Contains(message, e.Message);
    }
    [Theory]
    [InlineData("centralized", -1, "--evaluation-days must be 0 or more, got -1")]
    [InlineData("federated", 1, "--evaluation-days applies to --mode centralized only")]
    public void Evaluation_days_are_checked(string mode, int evaluation, string message)
    {
        var e = Assert.Throws<UserInputException>(() => Run(new TrainOptions(mode, "actor-critic", Days: 2, EvaluationDays: evaluation)));
        Assert.Contains(message, e.Message);
    }

    [Theory]
    [InlineData("centralized", "actor-critic", "flat", "--warm-start-rule: unknown rule 'flat'; use peak or cheapest-period")]
    [InlineData("centralized", "q-learning", "peak", "--warm-start-rule applies to --mode centralized --learner actor-critic only")]
    [InlineData("federated", "actor-critic", "peak", "--warm-start-rule applies to --mode centralized --learner actor-critic only")]
    public void Warm_start_rule_is_checked(string mode, string learner, string rule, string message)
    {
        var e = Assert.Throws<UserInputException>(() => Run(new TrainOptions(mode, learner, Days: 2, WarmStartRule: rule)));
        Assert.Contains(message, e.Message);
    }

    [Fact]
    public void Evaluation_days_reach_the_summary()
    {
        var (code, output, _, dir) = Run(new TrainOptions("centralized", "q-learning", Days: 2, Seed: 3, Json: true, EvaluationDays: 1));
        try
        {
            Assert.Equal(0, code);
            using var doc = JsonDocument.Parse(output);
            Assert.Equal(1, doc.RootElement.GetProperty("evaluationDays").GetInt32());
        }
        finally { Directory.Delete(dir, true); }
    }
}

public class TrainProcessTests
{
    [Fact]
    public void Unknown_mode_exits_with_code_2_and_names_the_modes()
    {
        var (code, stdout, stderr) = CliProcess.Run("train", "--mode", "gossip", "--days", "1");
        Assert.Equal(2, code);
        Assert.Equal("", stdout);
        Assert.Contains("--mode: unknown mode 'gossip'; available: centralized, federated", stderr);
    }
}
