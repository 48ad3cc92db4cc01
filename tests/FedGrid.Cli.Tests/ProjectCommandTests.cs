using System.Text.Json;
using FedGrid.Grid.Feeders;

namespace FedGrid.Cli.Tests;

public sealed class ProjectCommandTests
{
    private static string Sample => Path.Combine(CliProcess.RepoRoot, "samples", "feeders", "baran-wu-33.json");

    /// <summary>The sample feeder with every bus load halved (its full load already breaks 0.95 pu at bus 18).</summary>
    private static string HalfLoadFeeder(string dir)
    {
        var f = FeederFile.Load(Sample);
        var half = Feeder.Create(f.Name + "-half", f.Buses.Select(b => b with { LoadPkW = b.LoadPkW / 2, LoadQkvar = b.LoadQkvar / 2 }).ToList(),
            f.Lines, f.Substation, f.BaseMva, f.Source);
        string path = Path.Combine(dir, "half.json");
        FeederFile.Write(half, path);
        return path;
    }

    [Fact]
    public void Random_seed_json_has_the_contract_fields_and_a_verified_projection()
    {
        var (code, stdout, stderr) = CliProcess.Run("project", "--feeder", Sample, "--random-seed", "1", "--json");
        Assert.True(code == 0, stderr);
        using var doc = JsonDocument.Parse(stdout);
        var root = doc.RootElement;
        Assert.Equal("projected", root.GetProperty("status").GetString());
        Assert.True(root.GetProperty("acVerified").GetBoolean());
        Assert.True(root.GetProperty("objective").GetDouble() > 0);
        Assert.True(root.GetProperty("maxRelaxationGap").GetDouble() < 1e-6);
        Assert.True(root.GetProperty("maxVoltageViolationPuBefore").GetDouble() > 0.01);
        Assert.True(root.GetProperty("maxVoltageViolationPuAfter").GetDouble() <= 1e-6);
        Assert.True(root.GetProperty("solveMs").GetDouble() > 0);
        Assert.True(root.GetProperty("iterations").GetInt32() > 0);
        Assert.InRange(root.GetProperty("minVoltagePuAfter").GetDouble(), 0.95 - 1e-6, 1.05);
        Assert.Equal(root.GetProperty("units").GetInt32(), root.GetProperty("setpoints").GetArrayLength());
        // Same seed, same answer.
        var again = CliProcess.Run("project", "--feeder", Sample, "--random-seed", "1", "--json");
        using var doc2 = JsonDocument.Parse(again.Out);
        Assert.Equal(root.GetProperty("objective").GetDouble(), doc2.RootElement.GetProperty("objective").GetDouble());
    }

    [Fact]
    public void Proposal_csv_is_projected_and_the_linear_formulation_also_verifies()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-project-").FullName;
        try
        {
            string feeder = HalfLoadFeeder(dir);
            string csv = Path.Combine(dir, "proposal.csv");
            File.WriteAllText(csv, "# two chargers at the far end\nunit,bus,minKw,maxKw,proposalKw,tanPhi,weight\nev-18,18,0,600,600,0,1\nheat-33,33,50,700,700,0.2,2\n");
            foreach (string form in new[] { "cone", "linear" })
            {
                var (code, stdout, stderr) = CliProcess.Run("project", "--feeder", feeder, "--proposal", csv, "--formulation", form, "--json");
                Assert.True(code == 0, stderr + stdout);
                using var doc = JsonDocument.Parse(stdout);
                var root = doc.RootElement;
                Assert.Equal("projected", root.GetProperty("status").GetString());
                Assert.Equal(form, root.GetProperty("formulation").GetString());
                var sp = root.GetProperty("setpoints").EnumerateArray().ToArray();
                Assert.Equal(["ev-18", "heat-33"], sp.Select(s => s.GetProperty("unit").GetString()));
                Assert.All(sp, s => Assert.True(s.GetProperty("setpointKw").GetDouble() < s.GetProperty("proposalKw").GetDouble()));
                Assert.True(sp[1].GetProperty("setpointKw").GetDouble() >= 50 - 1e-9);
            }
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Infeasible_base_load_exits_1_and_names_the_binding_limits()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-project-").FullName;
        try
        {
            string csv = Path.Combine(dir, "p.csv");
            File.WriteAllText(csv, "unit,bus,minKw,maxKw,proposalKw\nev-18,18,0,100,100\n");
            var (code, stdout, _) = CliProcess.Run("project", "--feeder", Sample, "--proposal", csv, "--json");
            Assert.Equal(1, code);
            using var doc = JsonDocument.Parse(stdout);
            Assert.Equal("infeasible", doc.RootElement.GetProperty("status").GetString());
            Assert.False(doc.RootElement.GetProperty("acVerified").GetBoolean());
            Assert.Contains(doc.RootElement.GetProperty("bindingLimits").EnumerateArray(), b => b.GetString()!.StartsWith("voltage lower limit at bus", StringComparison.Ordinal));
        }
        finally { Directory.Delete(dir, true); }
    }

    [Theory]
    [InlineData("unit,bus,minKw,maxKw,proposalKw\nev,18,0,abc,1\n", "line 2, column 'maxKw'")]
    [InlineData("unit,bus,minKw,maxKw,proposalKw\nev,18,0,10,11\n", "line 2, column 'proposalKw'")]
    [InlineData("unit,bus,minKw,maxKw,proposalKw\nev,99,0,10,5\n", "line 2, column 'bus'")]
    [InlineData("unit,bus,min,maxKw,proposalKw\n", "line 1, column 3")]
    [InlineData("unit,bus,minKw,maxKw,proposalKw\nev,18,-1,10,5\n", "column 'minKw'")]
    public void Bad_proposal_csv_exits_2_naming_line_and_column(string content, string expected)
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-project-").FullName;
        try
        {
            string csv = Path.Combine(dir, "bad.csv");
            File.WriteAllText(csv, content);
            var (code, _, stderr) = CliProcess.Run("project", "--feeder", Sample, "--proposal", csv);
            Assert.Equal(2, code);
            Assert.Contains(expected, stderr);
            Assert.Contains("bad.csv", stderr);
        }
        finally { Directory.Delete(dir, true); }
    }

    [Fact]
    public void Exactly_one_proposal_source_is_required()
    {
        var (code, _, stderr) = CliProcess.Run("project", "--feeder", Sample);
        Assert.Equal(2, code);
        Assert.Contains("exactly one of --proposal", stderr);
        (code, _, stderr) = CliProcess.Run("project", "--feeder", Sample, "--random-seed", "1", "--formulation", "exact");
        Assert.Equal(2, code);
        Assert.Contains("--formulation", stderr);
    }
}
