using System.CommandLine;
using DriftWatch.Charts;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch chart RUN</c>: renders the run's charts to PNG files.</summary>
internal static class ChartCommand
{
    /// <summary>The folder charts go to when <c>--out</c> is not given.</summary>
    public const string DefaultFolder = "driftwatch-charts";

    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var method = CommonOptions.Method();
        var kind = new Option<string?>("--kind")
        {
            Description = "Which chart: evidence, trend, divergence, heatmap, drift, feature, or all of them. "
                + "Default: the evidence chart of the run's most severe finding, then the trend chart (the trend chart alone when nothing was found).",
            HelpName = "KIND",
        };
        kind.AcceptOnlyFromAmong([.. ChartCatalog.All.Select(ChartCatalog.Spelling), "all"]);
        var finding = new Option<string?>("--finding")
        {
            Description = "The finding kind whose evidence chart to draw: "
                + string.Join(", ", FindingKinds()) + ". Default: the kind of the run's most severe finding.",
            HelpName = "FINDING",
        };
        finding.AcceptOnlyFromAmong([.. FindingKinds()]);
        var feature = CommonOptions.Feature();
        var value = CommonOptions.HeatmapValueOption();
        var top = CommonOptions.Bounded(
            "--top",
            $"Features in the trend chart, ranked by share of importance on the held-out half at the last attributed epoch (1 to {TrendChart.MaximumTopFeatures}).",
            TrendChart.DefaultTopFeatures,
            1,
            TrendChart.MaximumTopFeatures);
        var columns = CommonOptions.Bounded(
            "--columns",
            $"Features (columns) in the divergence chart: flagged ones first, then the top ones (1 to {DivergenceChart.MaximumFeatures}).",
            DivergenceChart.DefaultFeatures,
            1,
            DivergenceChart.MaximumFeatures);
        var width = CommonOptions.Width();
        var height = CommonOptions.Height();
        var output = CommonOptions.OutputFolder(DefaultFolder, "The folder to write the PNGs to; created when missing.");

        var command = new Command(
            "chart",
            "Render charts of a run as PNG files and print their paths, one a line.\n"
            + "  evidence    the statistic a finding's rule judges (per half where it has halves) against its noise band or bound, "
            + "a bracket over the epochs the finding was raised (--finding KIND; default: the most severe finding)\n"
            + "  trend       share of importance per feature across epochs (held-out solid, training dashed) in its noise-floor band, "
            + "rings at the first and last epoch a finding names the feature; losses beneath\n"
            + "  divergence  training half against held-out half for flagged and top features: shares with bands, label alignment beneath\n"
            + "  heatmap     epoch × feature: held-out share (--value share), mean signed attribution (signed) or training minus held-out share (gap); "
            + "taller than --height's default with many features, so every name stays readable\n"
            + "  drift       verdicts, drift score, rank agreement with the best epoch, generalisation gap and loss\n"
            + "  feature     per-row attributions of one feature (--feature NAME; default: the first flagged) as box plots per epoch and half\n"
            + "The first Caution and the first Halt are marked by a vertical line. Attributions describe the model, not causes.\n"
            + "Examples:\n"
            + "  driftwatch chart night-7\n"
            + "  driftwatch chart night-7 --kind evidence --finding memorised-identifier\n"
            + "  driftwatch chart night-7 --kind all --out charts\n"
            + "  driftwatch chart night-7 --kind feature --feature \"crate id\" --width 1600 --height 900\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            run,
            method,
            kind,
            finding,
            feature,
            value,
            top,
            columns,
            width,
            height,
            output,
        };
        command.SetAction(parse =>
        {
            string? named = parse.GetValue(kind);
            var choices = new ChartOptions
            {
                EvidenceKind = parse.GetValue(finding) is { } f ? ChartCatalog.ParseFinding(f) : null,
                TopFeatures = parse.GetValue(top),
                DivergenceFeatures = parse.GetValue(columns),
                Feature = parse.GetValue(feature),
                HeatmapValue = HeatmapChart.Parse(parse.GetValue(value)!),
                // An explicit --height is kept; the default grows for a heatmap of many features.
                GrowHeatmap = parse.GetResult(height) is null or { Implicit: true },
            };
            var size = new ChartSize(parse.GetValue(width), parse.GetValue(height));
            string folder = CommonOptions.Folder(parse.GetValue(output)!);
            IReadOnlyList<(ChartKind Kind, string Path)> written;
            using (var runStore = CommonOptions.OpenStore(parse, store))
            {
                var history = RunHistory.Load(runStore, parse.GetValue(run)!, parse.GetValue(method)!, rowsOfFlagged: named is "feature" or "all" && choices.Feature is null);
                if (history.Epochs.IsEmpty)
                    throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no complete epochs yet; nothing to chart");
                if (choices.Feature is { } chosen && history.FeatureIndex(chosen) < 0)
                    throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no feature '{DisplayText.Clean(chosen)}'; its features: {DisplayText.Clean(string.Join(", ", history.FeatureNames), 400)}");
                // --finding alone asks for that evidence chart.
                var kinds = named is not null ? ChartCatalog.Parse(named) : choices.EvidenceKind is not null ? [ChartKind.Evidence] : ChartCatalog.Leading(history);
                written = Progress.Run(parse, "Rendering charts", kinds.Count, step =>
                    ChartCatalog.RenderAll(runStore, history, kinds, choices, folder, size, k => step($"{ChartCatalog.Spelling(k)} chart")));
            }
            foreach (var (_, path) in written)
                parse.InvocationConfiguration.Output.WriteLine(path);
            return ExitCodes.Fine;
        });
        return command;
    }

    private static IEnumerable<string> FindingKinds() =>
        DriftWatch.Detection.Rules.FindingRules.Kinds.Select(k => ChartCatalog.Spelling(k.Kind));
}
