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
                (ExitCodes.BadInput, "bad input (missing or foreign store, unknown run, bad policy file)"),
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
            using (var runStore = CommonOptions.OpenStore(parse, store))
            {
                document = runStore.GetRun(parse.GetValue(run)!);
                verdicts = gate is null
                    ? runStore.Verdicts(document.Id).Select(VerdictDocuments.FromDocument).ToList()
                    : RunReview.Replay(runStore, document, gate).Select(a => a.Verdict).ToList();
            }

            var latest = verdicts.Count == 0 ? null : verdicts[^1];
            var firstHalt = verdicts.FirstOrDefault(v => v.IsHalt);
            bool halt = latest?.IsHalt == true || (parse.GetValue(any) && firstHalt is not null);
            string source = policyPath is null ? "stored verdicts" : "policy " + policyPath;
            string? notChecked = RunContext.FromRun(document).NotChecked;
            if (parse.GetValue(json))
                WriteJson(output, document.Name, latest, firstHalt, halt, source, notChecked);
            else
                WriteText(output, document.Name, latest, firstHalt, halt, source, notChecked);
            return halt ? ExitCodes.Halt : ExitCodes.Fine;
        });
        return command;
    }

    private static void WriteText(TextWriter output, string run, Verdict? latest, Verdict? firstHalt, bool halt, string source, string? notChecked)
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
            output.WriteLine("  A Halt is advice to a person, not proof: attributions describe the model, not causes in the data.");
    }

    private static void WriteJson(TextWriter output, string run, Verdict? latest, Verdict? firstHalt, bool halt, string source, string? notChecked)
    {
        var document = new Dictionary<string, object?>
        {
            ["run"] = run,
            ["source"] = source,
            ["epoch"] = latest?.Epoch,
            ["verdict"] = latest?.Kind.ToString(),
            ["haltAdvised"] = halt,
            ["firstHaltEpoch"] = firstHalt?.Epoch,
            ["notChecked"] = notChecked,
            ["findings"] = latest?.Findings.Select(f => new Dictionary<string, object?>
            {
                ["kind"] = f.Kind.ToString(),
                ["severity"] = f.Severity.ToString(),
                ["feature"] = f.Feature,
                ["size"] = double.IsFinite(f.Size) ? f.Size : null,
                ["noiseFloor"] = double.IsFinite(f.NoiseFloor) ? f.NoiseFloor : null,
                ["sizeMeasures"] = f.Kind.Info.Measure.Size,
                ["judgedAgainst"] = f.Kind.Info.Measure.Against,
                ["unit"] = f.Kind.Info.Measure.Unit,
                ["epochs"] = new[] { f.Epochs.First, f.Epochs.Last },
                ["evidence"] = f.Evidence,
                ["seenOnlyBy"] = f.SeenOnlyBy.IsDefaultOrEmpty ? Array.Empty<string>() : f.SeenOnlyBy.ToArray(),
                ["agreement"] = double.IsFinite(f.Agreement) ? f.Agreement : null,
            }).ToList() ?? [],
        };
        output.WriteLine(JsonSerializer.Serialize(document));
    }
}
