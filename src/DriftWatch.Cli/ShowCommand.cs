using System.CommandLine;
using DriftWatch.Charts;
using DriftWatch.Charts.Report;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch show RUN</c>: one line per epoch with losses, verdict and the features that carry the most importance.</summary>
internal static class ShowCommand
{
    /// <summary>Most features per epoch the table shows.</summary>
    public const int MaximumTop = 10;

    private const int FeatureNameLength = 28;

    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var method = CommonOptions.Method();
        var top = CommonOptions.Bounded("--top", $"How many features to list per epoch, by share of importance on the held-out half (1 to {MaximumTop}).", 3, 1, MaximumTop);
        var json = CommonOptions.Json("the run (header, every epoch with every feature's share on each half, the findings, every method's rank agreement and quality figures per epoch)");
        var command = new Command(
            "show",
            "Show a run epoch by epoch: train and validation loss, the verdict, the features with the largest share of "
            + "importance on the held-out half, and how much larger each one's share is on the training half (percentage points). "
            + "Verdict reasons and monitoring problems follow the table.\n"
            + "Examples:\n"
            + "  driftwatch show night-7 --top 5\n"
            + "  driftwatch show night-7 --json | jq '.findings'\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            run,
            method,
            top,
            json,
        };
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            RunHistory history;
            string path;
            IReadOnlyList<Storage.MapQualityDocument> quality;
            IReadOnlyList<Storage.MapDocument> maps;
            List<string> reattributed;
            IReadOnlyList<MapTrust> trust;
            using (var runStore = CommonOptions.OpenStore(parse, store))
            {
                history = RunHistory.Load(runStore, parse.GetValue(run)!, parse.GetValue(method)!);
                path = runStore.Path;
                var document = runStore.GetRun(history.RunName);
                // Only the epochs the history read whole: a writer may have committed another since (the epoch list is the marker).
                var whole = history.Epochs.Select(e => e.Epoch).ToHashSet();
                quality = [.. runStore.Quality(document.Id, history.Method).Where(q => whole.Contains(q.Epoch))];
                maps = [.. runStore.MapAggregates(document.Id).Where(m => whole.Contains(m.Epoch))];
                reattributed = runStore.MapMethods(document.Id).Where(m => !history.Methods.Contains(m)).ToList();
                trust = RunTrust.Load(runStore, history);
            }
            if (parse.GetValue(json))
            {
                WriteJson(output, history, path, trust);
                return ExitCodes.Fine;
            }
            WriteHeader(output, history, path);
            if (history.Epochs.IsEmpty)
            {
                output.WriteLine();
                output.WriteLine("No complete epochs stored yet.");
                return ExitCodes.Fine;
            }
            output.WriteLine();
            WriteTable(output, history, parse.GetValue(top));
            output.WriteLine();
            TrustSection.Write(output, history.Method, maps, quality, reattributed, trust);
            output.WriteLine();
            WriteReasons(output, history);
            return ExitCodes.Fine;
        });
        return command;
    }

    private static void WriteJson(TextWriter output, RunHistory history, string path, IReadOnlyList<MapTrust> trust)
    {
        static double? Number(double? value) => value is double v && double.IsFinite(v) ? v : null;
        var document = new Dictionary<string, object?>
        {
            ["run"] = history.RunName,
            ["store"] = path,
            ["created_utc"] = history.CreatedUtc.ToString("yyyy-MM-ddTHH:mm:ssZ", System.Globalization.CultureInfo.InvariantCulture),
            ["description"] = history.Description,
            ["probe"] = new Dictionary<string, object> { ["held_out_rows"] = history.HeldOutRows, ["training_rows"] = history.TrainingRows, ["hash"] = history.ProbeHash },
            ["method"] = history.Method,
            ["methods"] = history.Methods.ToArray(),
            ["target"] = history.Target,
            ["not_checked"] = history.NotChecked,
            ["baseline"] = history.Baseline,
            ["features"] = history.FeatureNames.ToArray(),
            ["epochs"] = history.Epochs.Select(e => new Dictionary<string, object?>
            {
                ["epoch"] = e.Epoch,
                ["train_loss"] = Number(e.TrainLoss),
                ["validation_loss"] = Number(e.ValidationLoss),
                ["verdict"] = e.Verdict?.ToString(),
                ["held_out_share"] = e.IsAttributed ? e.HeldOutShare.Select(v => Number(v)).ToArray() : null,
                ["training_share"] = e.IsAttributed ? e.TrainingShare.Select(v => Number(v)).ToArray() : null,
                ["drift_score"] = Number(e.Statistics?.Drift),
                ["problems"] = e.Problems.ToArray(),
            }).ToList(),
            ["findings"] = RunFindings.Summarise(history).Select(f =>
            {
                var statistics = history.Epochs.FirstOrDefault(e => e.Epoch == f.FlaggedEpochs[^1])?.Statistics;
                var measure = Detection.FindingMeasures.Of(f.Kind, f.Size, f.NoiseFloor, statistics, history.FeatureNames.IndexOf(f.Feature));
                return new Dictionary<string, object?>
                {
                    ["kind"] = f.Kind.ToString(),
                    ["feature"] = f.Feature,
                    ["severity"] = f.Severity.ToString(),
                    ["epochs"] = f.FlaggedEpochs.ToArray(),
                    ["since_epoch"] = f.Since,
                    ["statistic"] = measure.Statistic == "none" ? null : Number(f.Size),
                    ["measure"] = measure.Statistic,
                    ["unit"] = measure.Unit,
                    ["bound"] = measure.HasBound ? Number(f.NoiseFloor) : null,
                    ["bound_kind"] = measure.Bound,
                    ["evidence"] = f.Evidence,
                    ["seen_only_by"] = f.SeenOnlyBy.IsDefaultOrEmpty ? Array.Empty<string>() : f.SeenOnlyBy.ToArray(),
                    ["agreement"] = Number(f.Agreement),
                };
            }).ToList(),
            ["trust"] = trust.Select(t => new Dictionary<string, object?>
            {
                ["epoch"] = t.Epoch,
                ["method"] = t.Method,
                ["agreement"] = Number(t.Agreement),
                ["measured"] = t.Measured,
                ["relative_infidelity"] = Number(t.RelativeInfidelity),
                ["relative_max_sensitivity"] = Number(t.RelativeMaxSensitivity),
                ["infidelity"] = Number(t.Infidelity),
                ["max_sensitivity"] = Number(t.MaxSensitivity),
                ["rows"] = t.Rows,
            }).ToList(),
        };
        output.WriteLine(System.Text.Json.JsonSerializer.Serialize(document, JsonText.Options));
    }

    private static void WriteHeader(TextWriter output, RunHistory history, string path)
    {
        output.WriteLine($"Run {DisplayText.Clean(history.RunName)}");
        output.WriteLine($"  store        {DisplayText.Clean(path)}");
        output.WriteLine($"  created      {Formats.Utc(history.CreatedUtc)} UTC");
        if (history.Description.Length > 0)
            output.WriteLine($"  description  {DisplayText.Clean(history.Description)}");
        string hash = history.ProbeHash.Length > 12 ? history.ProbeHash[..12] : history.ProbeHash;
        output.WriteLine($"  probe set    {Formats.Integer(history.HeldOutRows)} held-out + {Formats.Integer(history.TrainingRows)} training rows, hash {DisplayText.Clean(hash)}");
        output.WriteLine($"  features     {Formats.Integer(history.FeatureNames.Length)}");
        output.WriteLine($"  method       {DisplayText.Clean(history.Method)} (target {DisplayText.Clean(history.Target)}, baseline {DisplayText.Clean(history.Baseline)}); run's methods: {DisplayText.Clean(string.Join(", ", history.Methods))}");
        if (history.NotChecked is { } note)
            output.WriteLine($"  label rules  {DisplayText.Clean(note)}");
        if (!history.Epochs.IsEmpty)
        {
            int attributed = history.Epochs.Count(e => e.IsAttributed);
            output.WriteLine($"  epochs       {Formats.Integer(history.Epochs.Length)} stored ({Formats.Integer(history.Epochs[0].Epoch)} to {Formats.Integer(history.Epochs[^1].Epoch)}), {Formats.Integer(attributed)} attributed with this method");
        }
    }

    private static void WriteTable(TextWriter output, RunHistory history, int top)
    {
        var table = new TextTable(
            ">epoch",
            ">train loss",
            ">validation loss",
            "verdict",
            $"top {top} by held-out share",
            "training minus held-out (points)");
        foreach (var epoch in history.Epochs)
        {
            string features;
            string gaps;
            if (epoch.IsAttributed)
            {
                var ranked = epoch.TopByHeldOutShare(top);
                features = string.Join(", ", ranked.Select(f =>
                    $"{DisplayText.Clean(history.FeatureNames[f], FeatureNameLength)} {Formats.Percent(epoch.HeldOutShare[f])}"));
                gaps = string.Join(", ", ranked.Select(f => Formats.Points(epoch.TrainingShare[f] - epoch.HeldOutShare[f])));
            }
            else
            {
                features = "(not attributed)";
                gaps = "-";
            }
            table.Add(
                Formats.Integer(epoch.Epoch),
                Formats.Loss(epoch.TrainLoss),
                Formats.Loss(epoch.ValidationLoss),
                epoch.Verdict?.ToString() ?? "-",
                features,
                gaps);
        }
        table.Write(output);
    }

    // The findings once per story (a kind and feature over one span of epochs) with the latest evidence, then the
    // monitoring problems and any other stored reasons by epoch; the run's "not checked" line is in the header.
    private static void WriteReasons(TextWriter output, RunHistory history)
    {
        var stories = RunFindings.Summarise(history);
        var evidence = history.Epochs.SelectMany(e => e.Findings).Select(f => f.Evidence).ToHashSet(StringComparer.Ordinal);
        bool Told(string text) => evidence.Contains(text) || text == history.NotChecked;
        var lines = new List<string>();
        foreach (var epoch in history.Epochs)
        {
            // A stored reason reads "Severity: text"; the text of a finding's evidence or of the "not checked" line is told above.
            foreach (string reason in epoch.Reasons.Where(r => Told(r[(r.IndexOf(": ", StringComparison.Ordinal) + 2)..]) is false))
                lines.Add($"  epoch {Formats.Integer(epoch.Epoch)}  {DisplayText.Clean(reason)}");
            // The monitor also lists its own failures among the verdict's findings; show each once.
            foreach (string problem in epoch.Problems.Where(p => !epoch.Reasons.Any(r => r.EndsWith(p, StringComparison.Ordinal))))
                lines.Add($"  epoch {Formats.Integer(epoch.Epoch)}  problem: {DisplayText.Clean(problem)}");
        }
        if (stories.Count == 0 && lines.Count == 0)
        {
            output.WriteLine("No findings, verdict reasons or monitoring problems stored.");
            return;
        }
        if (stories.Count > 0)
        {
            output.WriteLine("Findings, once per span of epochs (latest evidence):");
            foreach (var story in stories)
            {
                string feature = story.Feature.Length == 0 ? "" : $" '{DisplayText.Clean(story.Feature, FeatureNameLength)}'";
                output.WriteLine($"  epochs {story.Span,-7} {story.Severity,-8} {DisplayText.Clean(RunFindings.Describe(story))}{feature}: {DisplayText.Clean(story.Evidence)}");
            }
        }
        if (lines.Count > 0)
        {
            if (stories.Count > 0)
                output.WriteLine();
            output.WriteLine("Other verdict reasons and monitoring problems:");
            foreach (string line in lines)
                output.WriteLine(line);
        }
    }
}
