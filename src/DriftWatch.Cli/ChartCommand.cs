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
        var kind = new Option<string>("--kind")
        {
            Description = "Which chart: trend, divergence, heatmap, drift, feature, or all of them.",
            HelpName = "KIND",
            DefaultValueFactory = _ => "trend",
        };
        kind.AcceptOnlyFromAmong("trend", "divergence", "heatmap", "drift", "feature", "all");
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
            + "  trend       share of importance per feature across epochs (held-out solid, training dashed) in its noise-floor band, "
            + "rings at the first and last epoch a finding names the feature; losses beneath\n"
            + "  divergence  training half against held-out half for flagged and top features: shares with bands, label alignment beneath\n"
            + "  heatmap     epoch × feature: held-out share (--value share), mean signed attribution (signed) or training minus held-out share (gap); "
            + "taller than --height's default with many features, so every name stays readable\n"
            + "  drift       verdicts, drift score, rank agreement with the best epoch, generalisation gap and loss\n"
            + "  feature     per-row attributions of one feature (--feature NAME; default: the first flagged) as box plots per epoch and half\n"
            + "Epochs with a Caution or Halt verdict are shaded. Attributions describe the model, not causes.\n"
            + "Examples:\n"
            + "  driftwatch chart night-7 --kind all --out charts\n"
            + "  driftwatch chart night-7 --kind feature --feature \"crate id\" --width 1600 --height 900\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            run,
            method,
            kind,
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
            var kinds = ChartCatalog.Parse(parse.GetValue(kind)!);
            var choices = new ChartOptions
            {
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
                var history = RunHistory.Load(runStore, parse.GetValue(run)!, parse.GetValue(method)!, rowsOfFlagged: kinds.Contains(ChartKind.Feature) && choices.Feature is null);
                if (history.Epochs.IsEmpty)
                    throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no complete epochs yet; nothing to chart");
                if (choices.Feature is { } named && history.FeatureIndex(named) < 0)
                    throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no feature '{DisplayText.Clean(named)}'; its features: {DisplayText.Clean(string.Join(", ", history.FeatureNames), 400)}");
                written = Progress.Run(parse, "Rendering charts", kinds.Count, step =>
                    ChartCatalog.RenderAll(runStore, history, kinds, choices, folder, size, k => step($"{ChartCatalog.Spelling(k)} chart")));
            }
            foreach (var (_, path) in written)
                parse.InvocationConfiguration.Output.WriteLine(path);
            return ExitCodes.Fine;
        });
        return command;
    }
}
