using System.CommandLine;
using System.Text.Json;
using DriftWatch.Charts;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch weights RUN --epoch best|last|N --out FILE</c>: writes out the weight snapshot of a chosen epoch.</summary>
internal static class WeightsCommand
{
    /// <summary>The command line that writes the best epoch's snapshot of <paramref name="run"/>, as check and the report print it.</summary>
    public static string Suggestion(string run, SnapshotFormat format = SnapshotFormat.Weights) =>
        $"driftwatch weights {Quoted(run)} --epoch {RunSnapshots.Best} --out {Quoted(ChartFiles.SafePart(run) + "-best" + RunSnapshots.Extension(format))}";

    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var epoch = new Option<string>("--epoch")
        {
            Description = $"Which epoch: {RunSnapshots.Best} (the lowest validation loss among the epochs with a snapshot), {RunSnapshots.Last} (the latest with a snapshot) or an epoch number.",
            HelpName = "best|last|N",
            DefaultValueFactory = _ => RunSnapshots.Best,
        };
        var output = new Option<string?>("--out")
        {
            Description = "The file to write (replaced if it exists). Default: RUN-epochN.weights (RUN-epochN.pt for a followed run) in the current folder.",
            HelpName = "FILE",
        };
        output.Validators.Add(result =>
        {
            if (string.IsNullOrWhiteSpace(result.GetValueOrDefault<string>()))
                result.AddError("--out must name a file; got an empty path");
        });
        var folder = new Option<string?>("--folder")
        {
            Description = "For a run watched with follow: its run folder, when it has moved since (default: the folder the store recorded).",
            HelpName = "FOLDER",
        };
        var json = CommonOptions.Json("the epoch chosen, why, and the file written");
        var command = new Command(
            "weights",
            "Write out the weight snapshot of one epoch of a run, e.g. the best one after a Halt: a TorchSharp weights file from the store "
            + "(load it with model.load(FILE) into a model of the run's architecture), or for a run watched with follow the epoch's "
            + "TorchScript file from its run folder (torch.jit.load). The store is only read. A Halt is advice to a person, not proof.\n"
            + "Examples:\n"
            + "  driftwatch weights night-7 --epoch best --out night-7-best.weights\n"
            + "  driftwatch weights night-7 --epoch 12 --out epoch12.weights\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "written"),
                (ExitCodes.BadInput, "bad input (missing or foreign store, unknown run, an epoch that is not stored or has no snapshot, no validation loss for best, a file that cannot be written), nothing written"),
                (ExitCodes.InternalError, "internal error")))
        {
            run,
            epoch,
            output,
            folder,
            json,
        };
        command.SetAction(parse =>
        {
            SnapshotChoice choice;
            string path;
            using (var runStore = CommonOptions.OpenStore(parse, store))
            {
                string name = parse.GetValue(run)!;
                string which = parse.GetValue(epoch)!;
                string? moved = parse.GetValue(folder);
                var chosen = RunSnapshots.Choose(runStore, name, which, moved);
                path = parse.GetValue(output) ?? $"{ChartFiles.SafePart(chosen.Run)}-epoch{Formats.Integer(chosen.Epoch)}{RunSnapshots.Extension(chosen.Format)}";
                choice = RunSnapshots.Write(runStore, name, which, path, moved);
            }
            string full = Path.GetFullPath(path);
            var writer = parse.InvocationConfiguration.Output;
            if (parse.GetValue(json))
            {
                writer.WriteLine(JsonSerializer.Serialize(new Dictionary<string, object?>
                {
                    ["run"] = choice.Run,
                    ["epoch"] = choice.Epoch,
                    ["why"] = choice.Why,
                    ["format"] = choice.Format == SnapshotFormat.Weights ? "torchsharp_weights" : "torchscript",
                    ["validation_loss"] = choice.ValidationLoss,
                    ["path"] = full,
                }, JsonText.Options));
            }
            else
            {
                string loss = choice.ValidationLoss is double v ? $", validation loss {Formats.Loss(v)}" : "";
                string kind = choice.Format == SnapshotFormat.Weights ? "TorchSharp weights" : "TorchScript";
                writer.WriteLine($"{DisplayText.Clean(full)}  ({kind} of epoch {Formats.Integer(choice.Epoch)}, {choice.Why}{loss})");
            }
            return ExitCodes.Fine;
        });
        return command;
    }

    private static string Quoted(string text) =>
        text.All(c => char.IsAsciiLetterOrDigit(c) || c is '-' or '_' or '.' or '/') ? text : "'" + text.Replace("'", "'\\''", StringComparison.Ordinal) + "'";
}
