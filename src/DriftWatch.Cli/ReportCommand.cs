using System.CommandLine;
using DriftWatch.Charts;
using DriftWatch.Charts.Report;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch report RUN</c>: one self-contained HTML file and a Markdown summary of a run.</summary>
internal static class ReportCommand
{
    /// <summary>The folder reports go to when <c>--out</c> is not given.</summary>
    public const string DefaultFolder = "driftwatch-report";

    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var method = CommonOptions.Method();
        var feature = CommonOptions.Feature();
        var width = CommonOptions.Width();
        var height = CommonOptions.Height();
        var output = CommonOptions.OutputFolder(DefaultFolder, "The folder to write the report to (HTML, Markdown, and the PNGs under charts/); created when missing.");
        var command = new Command(
            "report",
            "Write the morning-after report of a run and print the paths of its HTML and Markdown files: the run's description, "
            + "probe set and hash, methods and settings, policy; the verdict timeline; every finding with its evidence and the epochs it covers; "
            + "the trend, divergence, heatmap, drift and feature charts; and the caution that attributions describe the model, not causes, "
            + "and that a Halt is advice to a person. The HTML embeds its charts and loads nothing from anywhere; open it in any browser.\n"
            + "Examples:\n"
            + "  driftwatch report night-7 --store /runs/store.litedb --out reports/night-7\n"
            + "  driftwatch report night-7 --feature \"crate id\"\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            run,
            method,
            feature,
            width,
            height,
            output,
        };
        command.SetAction(parse =>
        {
            var options = new ReportOptions
            {
                Method = parse.GetValue(method)!,
                Size = new ChartSize(parse.GetValue(width), parse.GetValue(height)),
                Choices = new ChartOptions { Feature = parse.GetValue(feature) },
            };
            string folder = CommonOptions.Folder(parse.GetValue(output)!);
            ReportFiles files;
            using (var runStore = CommonOptions.OpenStore(parse, store))
            {
                files = Progress.Run(parse, "Writing the report", ChartCatalog.All.Count + 2, step =>
                    RunReport.Write(runStore, parse.GetValue(run)!, folder, options, step));
            }
            parse.InvocationConfiguration.Output.WriteLine(files.Html);
            parse.InvocationConfiguration.Output.WriteLine(files.Markdown);
            return ExitCodes.Fine;
        });
        return command;
    }
}
