using System.CommandLine;
using System.Diagnostics;
using System.Globalization;
using FedGrid.Audit;
using FedGrid.Audit.Attacks;
using FedGrid.Audit.Runs;
using FedGrid.Audit.Scoring;
using FedGrid.Torch.Attacks;

namespace FedGrid.Cli.Commands;

/// <summary><c>fedgrid audit RUN_DIR</c>: plays the honest-but-curious coordinator on a run's transcript and scores what it reconstructs.</summary>
internal static class AuditCommand
{
    /// <summary>Names accepted by --side-info.</summary>
    public static readonly string[] SideInfoNames = ["priors", "substation-meter"];

    public static Command Create()
    {
        var dir = new Argument<string>("RUN_DIR") { Description = "run folder written by 'fedgrid train --mode federated' (transcript.fgt, and ground-truth.simulation-only.csv for scoring)" };
        var side = new Option<string?>("--side-info") { Description = "side information the attacker may use, comma-separated: priors, substation-meter (default: priors)" };
        var json = new Option<bool>("--json") { Description = "print only the summary as JSON on stdout" };
        var report = new Option<bool>("--report") { Description = "also write the offline HTML report (exposure-report.html) into the run folder" };
        var gm = new Option<bool>("--gradient-matching") { Description = "also run gradient matching on the uploads (Geiping et al. 2020, TorchSharp autograd; slow: seconds per household and round)" };
        var gmIterations = new Option<int>("--gradient-matching-iterations") { Description = "Adam iterations per round for --gradient-matching", DefaultValueFactory = _ => new GradientMatchingOptions().Iterations };
        var gmTv = new Option<double>("--gradient-matching-tv") { Description = "weight of the total-variation prior over consecutive slots for --gradient-matching (0: off)" };
        var cmd = new Command("audit", "Attack a run's transcript as an honest-but-curious coordinator: exposure per channel, household and quantity, against a prior-only guess.")
        {
            dir, side, json, report, gm, gmIterations, gmTv,
        };
        cmd.SetAction(parse => Run(parse.GetValue(dir)!, parse.GetValue(side), parse.GetValue(json), parse.GetValue(report), Console.Out, Console.Error,
            parse.GetValue(gm) ? GradientMatching(parse.GetValue(gmIterations), parse.GetValue(gmTv)) : null));
        return cmd;
    }

    /// <summary>Reads a run folder, runs every attack (and gradient matching when given) and scores against the folder's ground truth if any.</summary>
    public static (AuditRun Run, AttackResults Results, ScoreCard? Card) Audit(string runDir, bool priors, bool meter, GradientMatchingOptions? gradientMatching, TextWriter progress)
    {
        var watch = Stopwatch.StartNew();
        AuditRun run;
        try { run = RunFolderReader.Load(runDir, priors, meter); }
        catch (RunFolderException e) { throw new UserInputException(e.Message); }
        progress.WriteLine($"audit: read {run.View.Households.Count} households, {run.View.SlotCount} slots ({watch.Elapsed.TotalSeconds:0.0} s)");
        if (run.TranscriptNote is { } note) progress.WriteLine("audit: " + note);
        IViewAttack[] extra = gradientMatching is null ? [] : [new GradientMatchingAttack(gradientMatching, progress)];
        AttackResults results = Auditor.Attack(run.View, new AttackOptions { UsePriors = priors, UseSubstationMeter = meter }, extra);
        ScoreCard? card = run.Truth is null ? null : Scorer.Score(run.View, results, run.Truth);
        progress.WriteLine($"audit: attacks and scoring done ({watch.Elapsed.TotalSeconds:0.0} s){(card is null ? "; no ground truth in the folder: identifiability only" : "")}");
        return (run, results, card);
    }

    /// <summary>Checks the gradient-matching settings and returns them.</summary>
    public static GradientMatchingOptions GradientMatching(int iterations, double tv)
    {
        if (iterations < 1) throw new UserInputException($"--gradient-matching-iterations: must be at least 1 (got {iterations})");
        if (!(tv >= 0) || double.IsInfinity(tv)) throw new UserInputException($"--gradient-matching-tv: must be a finite number ≥ 0 (got {tv})");
        return new GradientMatchingOptions { Iterations = iterations, TotalVariationWeight = tv };
    }

    /// <summary>Writes audit.json and, when asked, the offline report exposure-report.html into the run folder.</summary>
    public static void WriteFiles(string runDir, AuditRun run, AttackResults results, ScoreCard? card, bool writeReport, TextWriter progress)
    {
        File.WriteAllText(Path.Combine(runDir, "audit.json"), AuditDocument.FullJson(run.Context, run.View, results, card));
        if (!writeReport) return;
        string path = Path.Combine(runDir, "exposure-report.html");
        File.WriteAllText(path, AuditDocument.Html(run.Context, run.View, results, card));
        progress.WriteLine($"audit: report {path}");
    }

    /// <summary>Audits and prints; writes audit.json (and the report) into the run folder. Returns the exit code.</summary>
    public static int Run(string runDir, string? sideInfo, bool asJson, bool writeReport, TextWriter output, TextWriter progress, GradientMatchingOptions? gradientMatching = null)
    {
        var names = (sideInfo ?? "priors").Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries);
        foreach (string n in names)
            if (!SideInfoNames.Contains(n, StringComparer.Ordinal))
                throw new UserInputException($"--side-info: unknown '{n}'; use a comma-separated list of {string.Join(", ", SideInfoNames)}");
        bool priors = names.Contains("priors"), meter = names.Contains("substation-meter");
        (AuditRun run, AttackResults results, ScoreCard? card) = Audit(runDir, priors, meter, gradientMatching, progress);
        WriteFiles(runDir, run, results, card, writeReport, progress);
        if (asJson)
        {
            output.Write(AuditDocument.SummaryJson(run.Context, results, card));
            return CliRunner.ExitOk;
        }
        output.WriteLine($"Audit of {run.Context.Title}: scheme {run.Context.Scheme}, projection inputs {run.Context.ProjectionInputs}, side information: {string.Join(", ", run.Context.SideInformation)}");
        if (card is null)
        {
            output.WriteLine("No ground truth: identifiability only (see audit.json).");
        }
        else
        {
            output.WriteLine($"{"channel",-17} {"attack",-26} {"quantity",-12} {"relRMSE",10} {"mostExposed",12} {"prior",8} {"exposure",9}");
            foreach (ChannelSummary s in card.Summaries)
                output.WriteLine(string.Create(CultureInfo.InvariantCulture,
                    $"{AuditNames.Of(s.Channel),-17} {s.Attack,-26} {AuditNames.Of(s.Quantity),-12} {s.RelativeRmse,10:G3} {s.WorstHouseholdRelativeRmse,12:G3} {s.PriorRelativeRmse,8:G3} {s.ExposureRatio,9:G3}"));
            output.WriteLine(string.Create(CultureInfo.InvariantCulture, $"Occupancy accuracy {card.OccupancyAccuracy:0.000} (prior-only guess {card.PriorOccupancyAccuracy:0.000})."));
        }
        foreach (string n in results.Notes) output.WriteLine("Note: " + n);
        output.WriteLine("Caution: " + AuditDocument.Caution);
        return CliRunner.ExitOk;
    }
}
