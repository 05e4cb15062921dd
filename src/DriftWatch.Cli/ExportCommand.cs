using System.CommandLine;
using System.Text.Json;
using DriftWatch.Charts;
using DriftWatch.Export;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch export RUN --format csv|json|parquet --out PATH</c>: the run as tidy tables for other tools.</summary>
internal static class ExportCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var format = new Option<string>("--format")
        {
            Description = "csv (RFC 4180), json (an array of flat records per file) or parquet (Apache Parquet): three files each, one per table.",
            HelpName = "FORMAT",
            DefaultValueFactory = _ => "csv",
        };
        format.AcceptOnlyFromAmong("csv", "json", "parquet");
        var output = new Option<string>("--out")
        {
            Description = "The importance table's file; the epoch and findings tables go beside it as NAME-epochs.EXT and NAME-findings.EXT. Default: RUN.FORMAT in the current folder.",
            HelpName = "PATH",
        };
        output.Validators.Add(result =>
        {
            if (string.IsNullOrWhiteSpace(result.GetValueOrDefault<string>()))
                result.AddError("--out must name a file; got an empty path");
        });
        var exact = new Option<bool>("--exact-names")
        {
            Description = "CSV only: write every name exactly as stored, for a program that reads the table back. Default: safe for a spreadsheet — "
                + "a name starting with =, +, - or @ gets a leading apostrophe (shown as text, never run as a formula) and control characters are left out.",
        };
        var json = CommonOptions.Json("the files written and their row counts");
        var command = new Command(
            "export",
            "Export a run as tidy tables that pandas, R, DuckDB or Spark read directly, and print the files written.\n"
            + "  importance: one row per epoch, method, target, half and feature: run, epoch, method, target, half, feature, importance "
            + "(mean |attribution|), share (0 to 1), lower and upper (share ± half its 90% noise floor, where the detector stored one), "
            + "signed_mean, alignment, share_width, and the noise floors the rules read: share_gap, share_gap_width, alignment_gap, alignment_gap_width\n"
            + "  epochs: one row per epoch: run, epoch, verdict, findings (a count), train_loss, validation_loss, drift_score, rank_agreement_with_best, "
            + "jensen_shannon_from_previous, top_five_jaccard, generalisation_loss (percent), lead_width_held_out, lead_width_training, "
            + "and metric_NAME for each other metric the loop reported\n"
            + "  findings: one row per finding span (a kind and feature found at consecutive stored epochs): run, from_epoch, to_epoch, epochs, "
            + "since_epoch, kind, feature, severity, statistic, measure, unit, bound, bound_kind (noise_floor or policy_bound), evidence, "
            + "seen_only_by, agreement — as the span's last epoch lists it\n"
            + "Missing values are empty (CSV) or null (JSON, Parquet). Attributions describe the model, not causes.\n"
            + "Examples:\n"
            + "  driftwatch export night-7 --format parquet --out exports/night-7.parquet\n"
            + "  driftwatch export night-7 --format csv --out night-7.csv     (writes night-7.csv, night-7-epochs.csv and night-7-findings.csv)\n"
            + "  python3 -c \"import pandas; print(pandas.read_json('night-7-findings.json'))\"     (after --format json)\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            run,
            format,
            output,
            exact,
            json,
        };
        command.SetAction(parse =>
        {
            var exportFormat = RunExport.ParseFormat(parse.GetValue(format)!);
            RunTables tables;
            using (var runStore = CommonOptions.OpenStore(parse, store))
                tables = Progress.Run(parse, "Reading the run", 1, step =>
                {
                    step("importance and epochs");
                    return RunTables.Read(runStore, parse.GetValue(run)!);
                });
            string path = parse.GetValue(output) ?? ChartFiles.SafePart(tables.Run) + "." + exportFormat.ToString().ToLowerInvariant();
            var files = RunExport.Write(tables, exportFormat, path, parse.GetValue(exact) ? CsvText.Exact : CsvText.FormulaSafe);
            var writer = parse.InvocationConfiguration.Output;
            if (parse.GetValue(json))
            {
                writer.WriteLine(JsonSerializer.Serialize(new Dictionary<string, object>
                {
                    ["run"] = tables.Run,
                    ["format"] = exportFormat.ToString().ToLowerInvariant(),
                    ["importance"] = new Dictionary<string, object> { ["path"] = files.Importance, ["rows"] = files.ImportanceRows },
                    ["epochs"] = new Dictionary<string, object> { ["path"] = files.Epochs, ["rows"] = files.EpochRows },
                    ["findings"] = new Dictionary<string, object> { ["path"] = files.Findings, ["rows"] = files.FindingRows },
                }, JsonText.Options));
            }
            else
            {
                writer.WriteLine(files.Importance);
                writer.WriteLine(files.Epochs);
                writer.WriteLine(files.Findings);
            }
            return ExitCodes.Fine;
        });
        return command;
    }
}
