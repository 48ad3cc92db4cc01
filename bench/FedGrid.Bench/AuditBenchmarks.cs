using BenchmarkDotNet.Attributes;
using BenchmarkDotNet.Configs;
using BenchmarkDotNet.Jobs;
using BenchmarkDotNet.Toolchains.InProcess.Emit;
using FedGrid.Audit.Attacks;
using FedGrid.Audit.Runs;
using FedGrid.Audit.Scoring;
using FedGrid.Federation.Protocol;
using FedGrid.Federation.Runs;
using FedGrid.Federation.Schemes;
using FedGrid.Federation.Training;
using FedGrid.Households.Scenarios;

namespace FedGrid.Bench;

/// <summary>
/// Auditing a 150-day, 32-household transcript of the default scenario (goal: at most 30 s for the whole audit, gradient
/// matching excluded). The run folder is trained once in the global setup (or taken from FEDGRID_AUDIT_RUN_PLAIN /
/// FEDGRID_AUDIT_RUN_PRIVATE). One launch, three iterations: each iteration is seconds long.
/// </summary>
[Config(typeof(AuditBenchmarkConfig))]
[MemoryDiagnoser]
public class AuditBenchmarks
{
    private string _plain = "", _private = "";
    private AuditRun? _plainRun, _privateRun;

    /// <summary>Days of the audited run.</summary>
    [Params(150)]
    public int Days { get; set; }

    [GlobalSetup]
    public void Setup()
    {
        _plain = Environment.GetEnvironmentVariable("FEDGRID_AUDIT_RUN_PLAIN") ?? Train(ClearScheme.PlainName);
        _private = Environment.GetEnvironmentVariable("FEDGRID_AUDIT_RUN_PRIVATE") ?? Train(ClearScheme.PrivateColumnsName);
        _plainRun = RunFolderReader.Load(_plain, substationMeter: true);
        _privateRun = RunFolderReader.Load(_private, substationMeter: true);
    }

    private string Train(string scheme)
    {
        string dir = Directory.CreateTempSubdirectory($"fedgrid-bench-audit-{scheme}-").FullName;
        var run = new InProcessFederation(DefaultScenario.Create(DefaultScenario.DefaultSeed, Days), new FederatedRunOptions
        {
            Scheme = FederationSchemes.FromName(scheme), Federation = new FederationOptions { Learning = TrainingDefaults.ActorCritic },
            TranscriptPath = Path.Combine(dir, RunFolderReader.TranscriptName), GroundTruthPath = Path.Combine(dir, GroundTruthWriter.FileName),
        });
        run.Run();
        return dir;
    }

    /// <summary>Reading the transcript, the simulation record and building the priors.</summary>
    [Benchmark]
    public int ReadPlainRunFolder() => RunFolderReader.Load(_plain, substationMeter: true).View.SlotCount;

    /// <summary>Every attack and the scoring on the plain run (view already read).</summary>
    [Benchmark]
    public int AttackAndScorePlain() => Scorer.Score(_plainRun!.View, Auditor.Attack(_plainRun.View), _plainRun.Truth!).Summaries.Count;

    /// <summary>Every attack (subspace and meter calibration included) and the scoring on the private-columns run.</summary>
    [Benchmark]
    public int AttackAndScorePrivateColumns() => Scorer.Score(_privateRun!.View, Auditor.Attack(_privateRun.View), _privateRun.Truth!).Summaries.Count;
}

/// <summary>One in-process job of three iterations without warm-up: each iteration of the audit takes seconds.</summary>
public sealed class AuditBenchmarkConfig : ManualConfig
{
    /// <summary>Creates the configuration.</summary>
    public AuditBenchmarkConfig() =>
        AddJob(Job.Default.WithToolchain(InProcessEmitToolchain.Instance).WithLaunchCount(1).WithWarmupCount(0).WithIterationCount(3).WithInvocationCount(1).WithUnrollFactor(1));
}
