using BenchmarkDotNet.Attributes;
using BenchmarkDotNet.Configs;
using BenchmarkDotNet.Jobs;
using BenchmarkDotNet.Toolchains.InProcess.Emit;
using FedGrid.Audit;
using FedGrid.Audit.Attacks;
using FedGrid.Audit.Runs;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;
using FedGrid.Torch.Attacks;

namespace FedGrid.Bench;

/// <summary>
/// Gradient matching on uploads, reported apart from the audit's 30 s goal: time per household (all its rounds) on a plain
/// federated run of the default scenario, against the analytic weight/bias ratio on the same household as a ratio.
/// The run is trained once in the global setup (or taken from FEDGRID_AUDIT_RUN_PLAIN). In-process (TorchSharp's native
/// files are in the bench output, patched by FedGrid.Torch.targets).
/// </summary>
[Config(typeof(GradientMatchingBenchmarkConfig))]
[MemoryDiagnoser]
public class GradientMatchingBenchmarks
{
    private AttackerView? _one;

    /// <summary>Days of the run (one round per day).</summary>
    [Params(2)]
    public int Days { get; set; }

    [GlobalSetup]
    public void Setup()
    {
        string dir = Environment.GetEnvironmentVariable("FEDGRID_AUDIT_RUN_PLAIN") ?? Train();
        AttackerView view = RunFolderReader.Load(dir, substationMeter: true).View;
        _one = view with { Households = [view.Households[0]] };
    }

    private string Train()
    {
        string dir = Directory.CreateTempSubdirectory("fedgrid-bench-gm-").FullName;
        new InProcessFederation(DefaultScenario.Create(DefaultScenario.DefaultSeed, Days), new FederatedRunOptions
        {
            Scheme = FederationSchemes.FromName(ClearScheme.PlainName), Federation = new FederationOptions { Learning = TrainingDefaults.ActorCritic },
            TranscriptPath = Path.Combine(dir, RunFolderReader.TranscriptName), GroundTruthPath = Path.Combine(dir, GroundTruthWriter.FileName),
        }).Run();
        return dir;
    }

    /// <summary>Gradient matching (default settings) on one household, all its rounds.</summary>
    [Benchmark]
    public int GradientMatchingOneHousehold()
    {
        var recs = new List<Reconstruction>();
        new GradientMatchingAttack().Run(_one!, new AttackOptions(), recs, [], []);
        return recs.Count;
    }

    /// <summary>The analytic weight/bias ratio (Phong et al. 2018) on the same household, the baseline of the ratio.</summary>
    [Benchmark(Baseline = true)]
    public int WeightBiasRatioOneHousehold()
    {
        var recs = new List<Reconstruction>();
        UploadRatioAttack.Run(_one!, new AttackOptions(), recs, [], []);
        return recs.Count;
    }
}

/// <summary>One in-process job of three iterations without warm-up, allowed to run long (one iteration is tens of seconds).</summary>
public sealed class GradientMatchingBenchmarkConfig : ManualConfig
{
    /// <summary>Creates the configuration.</summary>
    public GradientMatchingBenchmarkConfig() =>
        AddJob(Job.Default.WithToolchain(new InProcessEmitToolchain(TimeSpan.FromMinutes(30), logOutput: true)).WithLaunchCount(1).WithWarmupCount(0)
            .WithIterationCount(3).WithInvocationCount(1).WithUnrollFactor(1));
}
