using System.CommandLine;
using System.Text.Json;
using DriftWatch.Charts;
using DriftWatch.Detection;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch check RUN</c>: the gate's verdict for a run, as an exit code a scheduler can act on.</summary>
internal static class CheckCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var policy = new Option<string?>("--policy")
        {
            Description = "A gate policy JSON file; the stored epochs are judged again under it. Without it, the verdicts the monitor stored are read.",
            HelpName = "FILE",
        };
        var json = new Option<bool>("--json") { Description = "Print the verdict as one JSON object instead of text." };
        var any = new Option<bool>("--any") { Description = $"Exit {ExitCodes.Halt} when any epoch so far was judged Halt, not only the latest." };
        var command = new Command(
            "check",
            $"Print the gate's verdict for the latest complete epoch of a run, with its reasons, and exit {ExitCodes.Halt} when it is Halt, "
            + "so a scheduler can stop the training. Safe to run while training writes the store. A Halt is advice to a person, not proof.\n"
            + "Examples:\n"
            + $"  driftwatch check night-7 --store /runs/store.litedb; [ $? -eq {ExitCodes.Halt} ] && scancel \"$SLURM_JOB_ID\"\n"
            + "  driftwatch check night-7 --policy strict.json --json\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "Continue or Caution (or no epoch yet)"),
                (ExitCodes.Halt, "Halt advised"),
                (ExitCodes.BadInput, "bad input (missing, foreign or damaged store — see examine — unknown run, bad policy file)"),
                (ExitCodes.InternalError, "internal error")))
        {
            run,
            policy,
            json,
            any,
        };
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            string? policyPath = parse.GetValue(policy);
            var gate = policyPath is null ? null : GatePolicy.Load(policyPath);
            List<Verdict> verdicts;
            RunDocument document;
            EpochStatistics? latestStatistics;
            (string Command, SnapshotChoice Best)? weights;
            using (var runStore = CommonOptions.OpenStore(parse, store))
            {
                document = runStore.GetRun(parse.GetValue(run)!);
                Trust(runStore);
                if (gate is null)
                {
                    verdicts = runStore.Verdicts(document.Id).Select(VerdictDocuments.FromDocument).ToList();
                    latestStatistics = verdicts.Count == 0 ? null : runStore.StatisticsOf(document.Id).LastOrDefault(s => s.Epoch == verdicts[^1].Epoch)?.Statistics;
                }
                else
                {
                    var assessments = RunReview.Replay(runStore, document, gate);
                    verdicts = assessments.Select(a => a.Verdict).ToList();
                    latestStatistics = assessments.Count == 0 ? null : assessments[^1].Statistics;
                }
                weights = WeightsLine(runStore, document.Name);
            }

            var latest = verdicts.Count == 0 ? null : verdicts[^1];
            var firstHalt = verdicts.FirstOrDefault(v => v.IsHalt);
            bool halt = latest?.IsHalt == true || (parse.GetValue(any) && firstHalt is not null);
            string source = policyPath is null ? "stored verdicts" : "policy " + policyPath;
            var features = document.Features.Select(f => f.Name).ToList();
            string? notChecked = RunContext.FromRun(document).NotChecked;
            if (parse.GetValue(json))
                WriteJson(output, document.Name, latest, firstHalt, halt, source, latestStatistics, features, weights, notChecked);
            else
                WriteText(output, document.Name, latest, firstHalt, halt, source, weights, notChecked);
            return halt ? ExitCodes.Halt : ExitCodes.Fine;
        });
        return command;
    }

    // A verdict read from a damaged store could be "no complete epoch yet" for a store whose verdicts are gone: a scheduler
    // would never stop the training. A store that does not pass examine's check gets one line and exit 2 instead.
    private static void Trust(RunStore runStore)
    {
        var problems = runStore.Verify();
        if (problems.Count == 0)
            return;
        string more = problems.Count == 1 ? "" : $" (and {Formats.Integer(problems.Count - 1)} more)";
        throw new StoreException($"store '{runStore.Path}' cannot be trusted: {problems[0]}{more}; 'driftwatch examine --store {runStore.Path}' lists every problem — use an intact copy");
    }

    // The command that writes out the best epoch's snapshot, when the run kept one (null otherwise).
    private static (string Command, SnapshotChoice Best)? WeightsLine(RunStore store, string run)
    {
        try
        {
            var best = RunSnapshots.Choose(store, run, RunSnapshots.Best);
            return (WeightsCommand.Suggestion(run, best.Format), best);
        }
        catch (DriftWatchException)
        {
            return null; // no snapshot or no validation loss: nothing to name
        }
    }

    private static void WriteText(TextWriter output, string run, Verdict? latest, Verdict? firstHalt, bool halt, string source, (string Command, SnapshotChoice Best)? weights, string? notChecked)
    {
        string name = DisplayText.Clean(run);
        if (latest is null)
        {
            output.WriteLine($"{name}: no complete epoch yet ({DisplayText.Clean(source)})");
            return;
        }
        output.WriteLine($"{name}: epoch {Formats.Integer(latest.Epoch)}  {latest.Kind}{(halt ? "  — stopping is advised" : "")}  ({DisplayText.Clean(source)})");
        foreach (var finding in latest.Findings)
            output.WriteLine($"  {finding.Severity.ToString().ToLowerInvariant(),-8} {(finding.Kind.IsKnown ? finding.Kind.Name : DisplayText.Clean(finding.Kind.Info.PlainWords))} (epochs {finding.Epochs}): {DisplayText.Clean(finding.Evidence)}");
        if (notChecked is not null)
            output.WriteLine($"  {DisplayText.Clean(notChecked)}");
        if (firstHalt is not null && firstHalt.Epoch != latest.Epoch)
            output.WriteLine($"  first Halt at epoch {Formats.Integer(firstHalt.Epoch)}: {DisplayText.Clean(firstHalt.Reasons.FirstOrDefault() ?? "")}");
        if (halt)
        {
            output.WriteLine("  A Halt is advice to a person, not proof: attributions describe the model, not causes in the data.");
            if (weights is var (command, best))
                output.WriteLine($"  epoch {Formats.Integer(best.Epoch)} had the {best.Why}; write out its weights with: {DisplayText.Clean(command)}");
        }
    }

    private static void WriteJson(TextWriter output, string run, Verdict? latest, Verdict? firstHalt, bool halt, string source, EpochStatistics? statistics, List<string> features, (string Command, SnapshotChoice Best)? weights, string? notChecked)
    {
        var document = new Dictionary<string, object?>
        {
            ["run"] = run,
            ["source"] = source,
            ["epoch"] = latest?.Epoch,
            ["verdict"] = latest?.Kind.ToString(),
            ["halt_advised"] = halt,
            ["first_halt_epoch"] = firstHalt?.Epoch,
            ["not_checked"] = notChecked,
            ["best_epoch"] = weights?.Best.Epoch,
            ["weights_command"] = weights?.Command,
            ["findings"] = latest?.Findings.Select(f =>
            {
                var measure = FindingMeasures.Of(f, statistics, features.IndexOf(f.Feature));
                return new Dictionary<string, object?>
                {
                    ["kind"] = f.Kind.ToString(),
                    ["severity"] = f.Severity.ToString(),
                    ["feature"] = f.Feature,
                    ["statistic"] = measure.Statistic != "none" && double.IsFinite(f.Size) ? f.Size : null,
                    ["measure"] = measure.Statistic,
                    ["unit"] = measure.Unit,
                    ["bound"] = measure.HasBound && double.IsFinite(f.NoiseFloor) ? f.NoiseFloor : null,
                    ["bound_kind"] = measure.Bound,
                    ["since_epoch"] = f.Epochs.First,
                    ["epochs"] = new[] { f.Epochs.First, f.Epochs.Last },
                    ["evidence"] = f.Evidence,
                    ["seen_only_by"] = f.SeenOnlyBy.IsDefaultOrEmpty ? Array.Empty<string>() : f.SeenOnlyBy.ToArray(),
                    ["agreement"] = double.IsFinite(f.Agreement) ? f.Agreement : null,
                };
            }).ToList() ?? [],
        };
        output.WriteLine(JsonSerializer.Serialize(document, JsonText.Options));
    }
}
