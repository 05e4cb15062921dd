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
        var once = new Option<bool>("--once") { Description = "Judge every epoch already in the folder, then stop, instead of waiting for more; never waits for the folder." };
        var poll = CommonOptions.Bounded("--poll-seconds", "Seconds between looks for new snapshots while the run goes on.", 10, 1, 3600);
        var waitFor = CommonOptions.Bounded(
            "--wait-seconds",
            $"How long to wait for the run folder and its {RunFolder.SchemaFile} (the helper writes them at the first epoch) before giving up with exit {ExitCodes.BadInput} (0 to 604800; 0 does not wait). --once does not wait.",
            DefaultWaitSeconds, 0, 604_800, "SECONDS");
        var stopOnHalt = new Option<bool>("--stop-on-halt") { Description = "Stop at the first epoch judged Halt instead of recording the rest of the run." };
        var policy = new Option<string?>("--policy") { Description = "A gate policy JSON file. Default: the built-in policy.", HelpName = "FILE" };
        var command = new Command(
            "follow",
            "Watch a run folder written by a Python training loop (hooks/driftwatch_follow.py): attribute every TorchScript snapshot "
            + "already there in epoch order (epochs already in the store are skipped), then each new one as it appears; store the maps, "
            + $"print the gate's verdict per epoch and write it into the folder ({RunFolder.VerdictFile(1)}, …) for the helper's end_epoch to read. "
            + "Waits for a folder that does not exist yet (--wait-seconds). Records every epoch, Halt or not, and stops when the loop "
            + "marks the run finished, at once with --once, or at the first Halt with --stop-on-halt. "
            + "Unlike the reading commands, follow creates and writes the store. It executes the TorchScript snapshots in the folder, and "
            + "nothing else it reads. A Halt is advice to a person, not proof.\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "no epoch of the run is judged Halt"),
                (ExitCodes.Halt, "Halt advised at one epoch or more (they are named)"),
                (ExitCodes.BadInput, "bad input (a folder that did not appear in time, a missing or malformed schema, probe or metrics file, a missing epoch, "
                    + "a folder written by a newer helper, a snapshot that fails to load or rejects the probe rows, a bad policy), nothing of that epoch is stored"),
                (ExitCodes.InternalError, "internal error")))
        {
            folder,
            run,
            once,
            poll,
            waitFor,
            stopOnHalt,
            policy,
        };
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            var error = parse.InvocationConfiguration.Error;
            string path = parse.GetValue(folder)!;
            bool onlyOnce = parse.GetValue(once);
            bool haltStops = parse.GetValue(stopOnHalt);
            var wait = TimeSpan.FromSeconds(parse.GetValue(poll));
            string? policyPath = parse.GetValue(policy);
            var gate = policyPath is null ? GatePolicy.Default : GatePolicy.Load(policyPath);

            if (!onlyOnce)
                WaitForSchema(output, path, wait, TimeSpan.FromSeconds(parse.GetValue(waitFor)));
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
                // The snapshots stay in the run folder as TorchScript files; the store records the folder, so reattribute finds them.
                SaveSnapshots = false,
                RunFolder = runFolder.Path,
                Strict = true,
                // follow continues its own run: epochs already stored are skipped, the folder's later ones appended.
                Resume = true,
                Description = RunSnapshots.FollowedDescription(runFolder.Path),
            };
            // A follow stopped between storing an epoch and writing its verdict file leaves the loop waiting: the file is written now.
            if (stored >= 0)
            {
                foreach (var verdict in StoredVerdicts(storePath, name).Where(v => !File.Exists(Path.Combine(runFolder.Path, RunFolder.VerdictFile(v.Epoch)))))
                    TellTheLoop(runFolder, verdict, error);
            }
            var halts = new List<int>();
            Verdict? latest = null;
            int recorded = 0;
            using (var monitor = new TrainingMonitor(options))
            {
                output.WriteLine($"following '{DisplayText.Clean(runFolder.Path)}' as run '{DisplayText.Clean(name)}' in '{DisplayText.Clean(options.StorePath)}'"
                    + (monitor.LastEpoch >= 0 ? $"; epochs up to {Formats.Integer(monitor.LastEpoch)} are already stored" : ""));
                if (monitor.TookOver is not null)
                    output.WriteLine($"  {DisplayText.Clean(monitor.TookOver)}");
                bool stopped = false;
                while (!stopped)
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
                        recorded++;
                        Print(output, latest);
                        TellTheLoop(runFolder, latest, error);
                        if (latest.IsHalt)
                            halts.Add(latest.Epoch);
                        if (latest.IsHalt && haltStops)
                        {
                            output.WriteLine("  stopping (--stop-on-halt): Halt is advised. A Halt is advice to a person, not proof: attributions describe the model, not causes in the data.");
                            stopped = true;
                            break;
                        }
                    }
                    if (stopped || onlyOnce || (finished && pending.Count == 0))
                        break;
                    if (pending.Count == 0)
                        Thread.Sleep(wait);
                }
            }
            // Halts of epochs stored by earlier calls count too: the exit code speaks for the run, not for this call alone.
            var verdicts = StoredVerdicts(storePath, name);
            halts = [.. verdicts.Where(v => v.IsHalt).Select(v => v.Epoch).Union(halts).Order()];
            latest ??= verdicts.LastOrDefault();
            if (latest is null)
            {
                output.WriteLine("no complete epoch yet");
                return ExitCodes.Fine;
            }
            output.WriteLine($"done: {Formats.Integer(recorded)} epoch{(recorded == 1 ? "" : "s")} recorded in this call; latest epoch {Formats.Integer(latest.Epoch)} is {latest.Kind}"
                + (runFolder.IsFinished ? " (the run has finished)" : ""));
            if (halts.Count == 0)
                return ExitCodes.Fine;
            output.WriteLine($"Halt advised at epoch{(halts.Count == 1 ? "" : "s")} {string.Join(", ", halts.Select(Formats.Integer))}. A Halt is advice to a person, not proof: attributions describe the model, not causes in the data.");
            return ExitCodes.Halt;
        });
        return command;
    }

    /// <summary>The default of <c>--wait-seconds</c>: ten minutes.</summary>
    public const int DefaultWaitSeconds = 600;

    // Waits, within the bound, for the folder and its schema; the loop writes both at its first epoch.
    private static void WaitForSchema(TextWriter output, string path, TimeSpan poll, TimeSpan bound)
    {
        if (RunFolder.HasSchema(path))
            return;
        var clock = System.Diagnostics.Stopwatch.StartNew();
        output.WriteLine($"waiting up to {Formats.Integer((int)bound.TotalSeconds)} s for '{DisplayText.Clean(path)}' and its {RunFolder.SchemaFile} (the helper writes them at the first epoch)…");
        while (!RunFolder.HasSchema(path))
        {
            var left = bound - clock.Elapsed;
            if (left <= TimeSpan.Zero)
            {
                string what = Directory.Exists(path) ? $"run folder '{path}' has no {RunFolder.SchemaFile}" : $"run folder '{path}' does not exist";
                throw new DriftWatchException($"{what} after waiting {Formats.Integer((int)bound.TotalSeconds)} s; start the training loop (the helper writes it at the first epoch), or give a longer --wait-seconds");
            }
            Thread.Sleep(left < poll ? left : poll);
        }
    }

    // The verdict file the helper's end_epoch waits for. The epoch is stored already; a folder that cannot be written to
    // loses the loop its answer, not the record, so it is reported on stderr and following goes on.
    private static void TellTheLoop(RunFolder folder, Verdict verdict, TextWriter error)
    {
        try
        {
            folder.WriteVerdict(verdict);
        }
        catch (DriftWatchException e)
        {
            error.WriteLine($"warning: epoch {Formats.Integer(verdict.Epoch)} is stored, but its verdict file could not be written ({DisplayText.Clean(e.Message)}); the Python loop will not hear it");
        }
    }

    // The monitor keeps its store to itself; the stored verdicts are read through a store opened for reading.
    private static IReadOnlyList<Verdict> StoredVerdicts(string storePath, string name)
    {
        using var reading = CommonOptions.OpenForReading(storePath);
        var document = reading.FindRun(name);
        return document is null ? [] : [.. reading.Verdicts(document.Id).Select(VerdictDocuments.FromDocument)];
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
