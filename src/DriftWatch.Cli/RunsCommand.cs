using System.CommandLine;
using DriftWatch.Charts;
using DriftWatch.Detection;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch runs</c>: a table of the runs in the store.</summary>
internal static class RunsCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var json = CommonOptions.Json("the runs (an array, one object per run)");
        var command = new Command(
            "runs",
            "List the runs in the store: name, when created, epochs stored, the last epoch's losses, the last verdict and the most severe one.\n"
            + "Examples:\n"
            + "  driftwatch runs --store /runs/store.litedb\n"
            + "  DRIFTWATCH_STORE=/runs/store.litedb driftwatch runs --json\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            json,
        };
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            using var runStore = CommonOptions.OpenStore(parse, store);
            var runs = runStore.Runs();
            if (parse.GetValue(json))
            {
                WriteJson(output, runStore, runs);
                return ExitCodes.Fine;
            }
            if (runs.Count == 0)
            {
                output.WriteLine($"No runs in {DisplayText.Clean(runStore.Path)} yet.");
                return ExitCodes.Fine;
            }

            var table = new TextTable("run", "created (UTC)", ">epochs", ">last epoch", ">train loss", ">validation loss", "status", "worst verdict");
            foreach (var run in runs)
            {
                var epochs = runStore.Epochs(run.Id);
                var verdicts = WholeEpochs(runStore.Verdicts(run.Id), epochs);
                if (epochs.Count == 0)
                {
                    table.Add(run.Name, Formats.Utc(run.CreatedUtc), "0", "-", "-", "-", "no epochs", "-");
                    continue;
                }
                var last = epochs[^1];
                table.Add(
                    run.Name,
                    Formats.Utc(run.CreatedUtc),
                    Formats.Integer(epochs.Count),
                    Formats.Integer(last.Epoch),
                    Formats.Loss(last.Metrics.TryGetValue(MetricKeys.TrainLoss, out double train) ? train : null),
                    Formats.Loss(last.Metrics.TryGetValue(MetricKeys.ValidationLoss, out double validation) ? validation : null),
                    verdicts.Count == 0 ? "no verdict" : verdicts[^1].Kind,
                    Worst(verdicts));
            }
            output.WriteLine($"{runs.Count} run{(runs.Count == 1 ? "" : "s")} in {DisplayText.Clean(runStore.Path)}");
            output.WriteLine();
            table.Write(output);
            return ExitCodes.Fine;
        });
        return command;
    }

    // Verdicts of the epochs listed only: the epoch document is written last, so a verdict read after the epoch list may
    // belong to an epoch a writer committed in between.
    private static List<VerdictDocument> WholeEpochs(IReadOnlyList<VerdictDocument> verdicts, IReadOnlyList<EpochDocument> epochs)
    {
        var listed = epochs.Select(e => e.Epoch).ToHashSet();
        return [.. verdicts.Where(v => listed.Contains(v.Epoch))];
    }

    private static void WriteJson(TextWriter output, RunStore runStore, IReadOnlyList<RunDocument> runs)
    {
        var list = runs.Select(run =>
        {
            var epochs = runStore.Epochs(run.Id);
            var verdicts = WholeEpochs(runStore.Verdicts(run.Id), epochs);
            var last = epochs.Count == 0 ? null : epochs[^1];
            var worst = verdicts
                .Select(v => (Verdict: v, Kind: Enum.TryParse<VerdictKind>(v.Kind, out var kind) ? kind : VerdictKind.Continue))
                .OrderByDescending(v => v.Kind)
                .ThenBy(v => v.Verdict.Epoch)
                .FirstOrDefault();
            return new Dictionary<string, object?>
            {
                ["name"] = run.Name,
                ["createdUtc"] = (run.CreatedUtc.Kind == DateTimeKind.Local ? run.CreatedUtc.ToUniversalTime() : run.CreatedUtc).ToString("yyyy-MM-ddTHH:mm:ssZ", System.Globalization.CultureInfo.InvariantCulture),
                ["description"] = run.Description,
                ["epochs"] = epochs.Count,
                ["lastEpoch"] = last?.Epoch,
                ["trainLoss"] = Finite(last, MetricKeys.TrainLoss),
                ["validationLoss"] = Finite(last, MetricKeys.ValidationLoss),
                ["lastVerdict"] = verdicts.Count == 0 ? null : verdicts[^1].Kind,
                ["worstVerdict"] = worst.Verdict?.Kind,
                ["worstVerdictEpoch"] = worst.Verdict?.Epoch,
            };
        }).ToList();
        output.WriteLine(System.Text.Json.JsonSerializer.Serialize(list, JsonText.Options));
    }

    private static double? Finite(EpochDocument? epoch, string key) =>
        epoch is not null && epoch.Metrics.TryGetValue(key, out double value) && double.IsFinite(value) ? value : null;

    // The most severe verdict and the first epoch it was given, so a Halt earlier in the run is not hidden by a later Continue.
    private static string Worst(IReadOnlyList<VerdictDocument> verdicts)
    {
        var worst = verdicts
            .Select(v => (Verdict: v, Kind: Enum.TryParse<VerdictKind>(v.Kind, out var kind) ? kind : VerdictKind.Continue))
            .Where(v => v.Kind != VerdictKind.Continue)
            .OrderByDescending(v => v.Kind)
            .ThenBy(v => v.Verdict.Epoch)
            .FirstOrDefault();
        return worst.Verdict is null ? "-" : $"{worst.Kind} at epoch {Formats.Integer(worst.Verdict.Epoch)}";
    }
}
