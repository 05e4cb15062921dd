using System.CommandLine;
using DriftWatch.Charts;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch chart RUN</c>: renders the run's trend chart to a PNG file.</summary>
internal static class ChartCommand
{
    /// <summary>The folder charts go to when <c>--out</c> is not given.</summary>
    public const string DefaultFolder = "driftwatch-charts";

    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var method = CommonOptions.Method();
        var top = CommonOptions.Bounded(
            "--top",
            $"How many features to draw, ranked by share of importance on the held-out half at the last attributed epoch (1 to {TrendChart.MaximumTopFeatures}).",
            TrendChart.DefaultTopFeatures,
            1,
            TrendChart.MaximumTopFeatures);
        var width = CommonOptions.Bounded("--width", $"Picture width in pixels ({ChartSize.MinimumSide} to {ChartSize.MaximumSide}).", ChartSize.Default.Width, ChartSize.MinimumSide, ChartSize.MaximumSide, "PIXELS");
        var height = CommonOptions.Bounded("--height", $"Picture height in pixels ({ChartSize.MinimumSide} to {ChartSize.MaximumSide}).", ChartSize.Default.Height, ChartSize.MinimumSide, ChartSize.MaximumSide, "PIXELS");
        var output = new Option<string>("--out")
        {
            Description = "The folder to write the PNG to; created when missing.",
            HelpName = "FOLDER",
            DefaultValueFactory = _ => DefaultFolder,
        };
        output.Validators.Add(result =>
        {
            if (string.IsNullOrWhiteSpace(result.GetValueOrDefault<string>()))
                result.AddError("--out must name a folder; got an empty path");
        });

        var command = new Command(
            "chart",
            "Render the run's trend chart as a PNG and print its path: each top feature's share of importance per epoch, "
            + "held-out half solid and training half dashed, above train and validation loss; epochs with a Caution or Halt verdict are marked.\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            run,
            method,
            top,
            width,
            height,
            output,
        };
        command.SetAction(parse =>
        {
            var chart = new TrendChart(parse.GetValue(top));
            var size = new ChartSize(parse.GetValue(width), parse.GetValue(height));
            RunHistory history;
            using (var runStore = CommonOptions.OpenStore(parse, store))
                history = RunHistory.Load(runStore, parse.GetValue(run)!, parse.GetValue(method)!);
            if (history.Epochs.IsEmpty)
                throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no complete epochs yet; nothing to chart");

            string folder = Path.GetFullPath(parse.GetValue(output)!);
            if (File.Exists(folder))
                throw new DriftWatchException($"--out '{DisplayText.Clean(folder)}' is a file; pass a folder for the charts");
            string path = Path.Combine(folder, ChartFiles.FileName(history.RunName, chart.Name, history.Method));
            try
            {
                Directory.CreateDirectory(folder);
                chart.Render(history, path, size);
            }
            catch (Exception e) when (e is IOException or UnauthorizedAccessException)
            {
                throw new DriftWatchException($"cannot write the chart to '{DisplayText.Clean(path)}': {e.Message}", e);
            }
            parse.InvocationConfiguration.Output.WriteLine(path);
            return ExitCodes.Fine;
        });
        return command;
    }
}
