using System.CommandLine;
using DriftWatch.Charts;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Storage;
using TorchSharp;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch follow FOLDER</c>: attributes and judges the TorchScript snapshots a Python training loop writes.</summary>
internal static class FollowCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var folder = new Argument<string>("folder") { Description = "The run folder the training loop writes with hooks/driftwatch_follow.py." };
        var run = new Option<string?>("--run") { Description = "The run's name in the store. Default: the folder's name. Reusing a name resumes that run.", HelpName = "NAME" };
        var once = new Option<bool>("--once") { Description = "Judge the epochs already in the folder, then stop, instead of waiting for more." };
        var poll = CommonOptions.Bounded("--poll-seconds", "Seconds between looks for new snapshots while the run goes on.", 10, 1, 3600);
        var policy = new Option<string?>("--policy") { Description = "A gate policy JSON file. Default: the built-in policy.", HelpName = "FILE" };
        var command = new Command(
            "follow",
            "Watch a run folder written by a Python training loop (hooks/driftwatch_follow.py): attribute every TorchScript snapshot "
            + "already there in epoch order (epochs already in the store are skipped), then each new one as it appears; store the maps and "
            + "print the gate's verdict per epoch. Stops when the loop marks the run finished, at the first Halt, or at once with --once. "
            + "Unlike the reading commands, follow creates and writes the store. It executes the TorchScript snapshots in the folder, and "
            + "nothing else it reads. A Halt is advice to a person, not proof.\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "the latest verdict is Continue or Caution"),
                (ExitCodes.Halt, "Halt advised"),
                (ExitCodes.BadInput, "bad input (missing or malformed folder, schema, probe or metrics file, a missing epoch, a snapshot that fails to load "
                    + "or rejects the probe rows, a bad policy), nothing of that epoch is stored"),
                (ExitCodes.InternalError, "internal error")))
        {
            folder,
            run,
            once,
            poll,
            policy,
        };
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            string path = parse.GetValue(folder)!;
            bool onlyOnce = parse.GetValue(once);
            var wait = TimeSpan.FromSeconds(parse.GetValue(poll));
            string? policyPath = parse.GetValue(policy);
            var gate = policyPath is null ? GatePolicy.Default : GatePolicy.Load(policyPath);

            if (!onlyOnce && Directory.Exists(path) && !RunFolder.HasSchema(path))
            {
                output.WriteLine($"waiting for {RunFolder.SchemaFile} in '{DisplayText.Clean(path)}' (written at the first epoch)…");
                while (!RunFolder.HasSchema(path))
                    Thread.Sleep(wait);
            }
            var runFolder = RunFolder.Open(path);
            string name = parse.GetValue(run) ?? new DirectoryInfo(runFolder.Path).Name;
            string storePath = parse.GetValue(store)!;

            // The folder's epochs are checked before the store is opened for writing, so a bad folder adds nothing to it.
            var checkedEpochs = new HashSet<int>();
            int stored = StoredLastEpoch(storePath, name);
            foreach (var epoch in runFolder.CompleteEpochs(runFolder.IsFinished).Where(e => e.Epoch > stored))
            {
                Check(runFolder, epoch);
                checkedEpochs.Add(epoch.Epoch);
            }
            var options = new MonitorOptions
            {
                StorePath = storePath,
                RunName = name,
                Schema = runFolder.Schema,
                Probe = runFolder.Probe,
                Target = runFolder.Target,
                Policy = gate,
                // The folder's counts when it gives them, else the probe's own training half counted (fewer rows: a
                // moderately many-valued categorical may then look identifier-like; docs/run-folder says so).
                TrainingValueCounts = runFolder.TrainingValueCounts.Count > 0
                    ? runFolder.TrainingValueCounts
                    : DriftWatch.Storage.SplitCheckDocuments.CountProbeTrainingHalf(runFolder.Schema, runFolder.Probe),
                // The snapshots stay in the run folder as TorchScript files; the store keeps their folder in the description.
                SaveSnapshots = false,
                Strict = true,
                // follow continues its own run: epochs already stored are skipped, the folder's later ones appended.
                Resume = true,
                Description = $"followed from {runFolder.Path} (TorchScript snapshots stay there)",
            };
            using var monitor = new TrainingMonitor(options);
            output.WriteLine($"following '{DisplayText.Clean(runFolder.Path)}' as run '{DisplayText.Clean(name)}' in '{DisplayText.Clean(options.StorePath)}'"
                + (monitor.LastEpoch >= 0 ? $"; epochs up to {Formats.Integer(monitor.LastEpoch)} are already stored" : ""));
            Verdict? latest = null;
            while (true)
            {
                bool finished = runFolder.IsFinished;
                var pending = runFolder.CompleteEpochs(finished).Where(e => e.Epoch > monitor.LastEpoch).ToList();
                // Every pending snapshot must load and accept the probe rows before any of them is stored.
                foreach (var epoch in pending.Where(e => checkedEpochs.Add(e.Epoch)))
                    Check(runFolder, epoch);
                foreach (var epoch in pending)
                {
                    using var model = TorchScriptModel.Load(epoch.SnapshotPath, runFolder.Schema, runFolder.EncodeMethod, runFolder.ScoreMethod, runFolder.Entry);
                    latest = monitor.EndEpoch(model.Watched, epoch.Epoch, epoch.Metrics);
                    Print(output, latest);
                    if (latest.IsHalt)
                    {
                        output.WriteLine("  stopping: Halt is advised. A Halt is advice to a person, not proof: attributions describe the model, not causes in the data.");
                        return ExitCodes.Halt;
                    }
                }
                if (onlyOnce || (finished && pending.Count == 0))
                    break;
                if (pending.Count == 0)
                    Thread.Sleep(wait);
            }
            latest ??= LatestVerdict(options.StorePath, monitor.Run.Id);
            output.WriteLine(latest is null
                ? "no complete epoch yet"
                : $"done: latest epoch {Formats.Integer(latest.Epoch)} is {latest.Kind}{(runFolder.IsFinished ? " (the run has finished)" : "")}");
            return latest?.IsHalt == true ? ExitCodes.Halt : ExitCodes.Fine;
        });
        return command;
    }

    // The monitor keeps its store to itself; the latest stored verdict is read through a store opened for reading.
    private static Verdict? LatestVerdict(string storePath, int runId)
    {
        using var reading = CommonOptions.OpenForReading(storePath);
        return reading.Verdicts(runId).Select(VerdictDocuments.FromDocument).LastOrDefault();
    }

    private static int StoredLastEpoch(string storePath, string name)
    {
        if (!File.Exists(storePath))
            return -1;
        using var reading = CommonOptions.OpenForReading(storePath);
        var document = reading.FindRun(name);
        return document is null ? -1 : reading.Epochs(document.Id).Select(e => e.Epoch).DefaultIfEmpty(-1).Max();
    }

    private static void Check(RunFolder folder, FolderEpoch epoch)
    {
        using var scope = torch.NewDisposeScope();
        using var model = TorchScriptModel.Load(epoch.SnapshotPath, folder.Schema, folder.EncodeMethod, folder.ScoreMethod, folder.Entry);
        var rows = folder.Probe.Rows;
        var dense = torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]);
        var categorical = torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount]);
        model.CheckRows(dense, categorical);
    }

    private static void Print(TextWriter output, Verdict verdict)
    {
        output.WriteLine($"epoch {Formats.Integer(verdict.Epoch)}  {verdict.Kind}");
        foreach (var finding in verdict.Findings)
            output.WriteLine($"  {finding.Severity.ToString().ToLowerInvariant(),-8} {finding.Kind}: {DisplayText.Clean(finding.Evidence)}");
    }
}
