using System.CommandLine;
using System.CommandLine.Parsing;
using System.Globalization;
using DriftWatch.Attribution;
using DriftWatch.Charts;
using DriftWatch.Model;
using DriftWatch.Sharding;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch reattribute RUN --method M</c>: recomputes a run's maps from its stored snapshots with another method and stores them beside the originals.</summary>
internal static class ReattributeCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var method = new Option<string>("--method")
        {
            Description = "The attribution method to recompute the maps with: " + string.Join(", ", AttributionMethods.Names)
                + ". When the run was attributed with it, its recorded settings are the starting point.",
            HelpName = "NAME",
            Required = true,
        };
        var settings = new Option<string[]>("--setting")
        {
            Description = "A method setting as KEY=VALUE, repeatable (e.g. --setting steps=128 for integrated-gradients, --setting samples=20 for smoothgrad).",
            HelpName = "KEY=VALUE",
            Arity = ArgumentArity.ZeroOrMore,
        };
        var epochs = new Option<string?>("--epochs")
        {
            Description = "The epochs to re-attribute: A..B, A.. (from A), ..B (up to B) or one epoch N. Default: every stored epoch.",
            HelpName = "A..B",
        };
        var storedAs = new Option<string?>("--as")
        {
            Description = "The method name the new maps are stored under (default: re-METHOD); it must differ from the run's own methods.",
            HelpName = "NAME",
        };
        var assembly = new Option<string?>("--model-assembly")
        {
            Description = "The .dll holding the run's model factory, when it is not part of DriftWatch; the only outside code this command runs.",
            HelpName = "PATH",
        };
        var runFolder = new Option<string?>("--run-folder")
        {
            Description = "For a run followed from a Python run folder: the folder whose TorchScript snapshots are the run's models. Default: the folder follow recorded.",
            HelpName = "FOLDER",
        };
        var chunk = CommonOptions.Bounded("--chunk-rows", "At most this many expanded rows go through the model at once (1 to 1000000).", AttributionInput.DefaultChunkRows, 1, 1_000_000);
        var quality = new Option<bool>("--quality")
        {
            Description = "Also measure the new maps' infidelity and max-sensitivity (Yeh et al. 2019) on 32 probe rows; costs about as much again.",
        };
        var shardOption = new Option<string?>("--shard")
        {
            Description = "Do only shard K of N (from 0) of the epochs, a contiguous block, and write its maps to a shard store of its own in --shard-folder "
                + "instead of the store, which is then only read; join the shards with 'driftwatch merge'. For a Slurm job array: hooks/driftwatch-shard.sbatch.",
            HelpName = "K/N",
        };
        var shardFolder = new Option<string>("--shard-folder")
        {
            Description = "Where --shard writes its shard store, shard-K-of-N.litedb (created when missing). Default: driftwatch-shards in the current folder.",
            HelpName = "FOLDER",
            DefaultValueFactory = _ => "driftwatch-shards",
        };

        var command = new Command(
            "reattribute",
            "Recompute a run's attribution maps from its stored weight snapshots and probe set with another method (or other settings) "
            + "and store them beside the originals under their own name, with their agreement with the maps already there; "
            + "stored maps are never changed, and epochs already re-attributed under that name are skipped. "
            + "With --shard K/N only a slice of the epochs is done and written to a shard store of its own, for many machines at once; 'merge' joins them. "
            + "The model is rebuilt with the factory the run recorded, or, for a run followed from a Python run folder, each epoch's TorchScript "
            + "snapshot there is the model. Progress goes to stderr on a terminal. "
            + "Attributions describe the model, not causes in the data.\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "done"),
                (ExitCodes.BadInput, "bad input (missing or foreign store, unknown run or method, bad setting, a model or snapshot that does not fit), nothing changed"),
                (ExitCodes.InternalError, "internal error")))
        {
            run,
            method,
            settings,
            epochs,
            storedAs,
            assembly,
            runFolder,
            chunk,
            quality,
            shardOption,
            shardFolder,
        };
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            var error = parse.InvocationConfiguration.Error;
            string runName = parse.GetValue(run)!;
            string methodName = parse.GetValue(method)!;
            var overrides = ParseSettings(parse.GetValue(settings) ?? []);
            var (first, last) = ParseEpochs(parse.GetValue(epochs));
            string path = parse.GetValue(store)!;
            Shard? shard = parse.GetValue(shardOption) is { } shardText ? Shard.Parse(shardText) : null;
            if (shard is null && parse.GetResult(shardFolder) is { Implicit: false })
                throw new DriftWatchException("--shard-folder goes with --shard K/N; without --shard the maps are stored in the store itself");
            if (shard is not null)
                return RunShard(parse, path, runName, methodName, overrides, first, last, shard.Value, parse.GetValue(shardFolder)!, parse.GetValue(storedAs), parse.GetValue(assembly), parse.GetValue(runFolder), parse.GetValue(chunk), parse.GetValue(quality));

            // Everything that can be refused is checked on a read-only store first, so bad input leaves the file untouched.
            RunDocument document;
            IAttributionMethod attribution;
            ReattributionOptions request;
            Models models;
            using (var reading = RunStore.OpenForReading(path))
            {
                document = reading.GetRun(runName);
                var recorded = document.Methods.FirstOrDefault(m => m.Name == methodName)?.Settings ?? [];
                var merged = new Dictionary<string, string>(recorded, StringComparer.Ordinal);
                foreach (var (key, value) in overrides)
                    merged[key] = value;
                attribution = AttributionMethods.Create(methodName, merged);
                request = new ReattributionOptions
                {
                    Method = attribution,
                    StoredName = parse.GetValue(storedAs),
                    FirstEpoch = first,
                    LastEpoch = last,
                    ChunkRows = parse.GetValue(chunk),
                    Quality = parse.GetValue(quality) ? new QualityOptions() : null,
                };
                models = Models.Of(document, parse.GetValue(assembly), parse.GetValue(runFolder));
                try
                {
                    Reattribution.Check(reading, document, models.Epochs, request);
                }
                catch
                {
                    models.Dispose();
                    throw;
                }
            }

            bool terminal = ReferenceEquals(error, Console.Error) && !Console.IsErrorRedirected;
            IReadOnlyList<ReattributedEpoch> results;
            try
            {
                using var runStore = RunStore.OpenForWriting(path);
                results = Reattribution.Run(runStore, runStore.GetRun(runName), models.Epochs, request, terminal ? new TerminalProgress(error) : null);
            }
            finally
            {
                models.Dispose();
                if (terminal)
                    error.WriteLine();
            }
            WriteSummary(output, document, request, attribution, models.Description, results, path);
            return ExitCodes.Fine;
        });
        return command;
    }

    // A shard: the store is only read; the maps go to a shard store of the shard's own, checked before anything is written.
    private static int RunShard(
        ParseResult parse, string path, string runName, string methodName, List<(string Key, string Value)> overrides, int first, int last,
        Shard shard, string folder, string? storedAs, string? assemblyPath, string? runFolder, int chunkRows, bool measureQuality)
    {
        var output = parse.InvocationConfiguration.Output;
        var error = parse.InvocationConfiguration.Error;
        if (string.IsNullOrWhiteSpace(folder))
            throw new DriftWatchException("--shard-folder must name a folder; got an empty path");
        string shardPath = Path.GetFullPath(Path.Combine(folder, shard.Name + ".litedb"));
        if (shardPath == Path.GetFullPath(path))
            throw new DriftWatchException($"the shard store '{shardPath}' would be the store itself; pass another --shard-folder");
        using var reading = RunStore.OpenForReading(path);
        var document = reading.GetRun(runName);
        var recorded = document.Methods.FirstOrDefault(m => m.Name == methodName)?.Settings ?? [];
        var merged = new Dictionary<string, string>(recorded, StringComparer.Ordinal);
        foreach (var (key, value) in overrides)
            merged[key] = value;
        var attribution = AttributionMethods.Create(methodName, merged);
        var request = new ReattributionOptions
        {
            Method = attribution,
            StoredName = storedAs,
            FirstEpoch = first,
            LastEpoch = last,
            ChunkRows = chunkRows,
            Quality = measureQuality ? new QualityOptions() : null,
        };
        using var models = Models.Of(document, assemblyPath, runFolder);
        bool terminal = ReferenceEquals(error, Console.Error) && !Console.IsErrorRedirected;
        IReadOnlyList<ReattributedEpoch> results;
        try
        {
            var all = Reattribution.Check(reading, document, models.Epochs, request);
            if (File.Exists(shardPath))
            {
                using var existing = RunStore.OpenForReading(shardPath);
                Reattribution.CheckShardStore(existing, ShardDocuments.For(document, request, shard, all, shard.Slice(all), reading.Path));
            }
            using var shardStore = RunStore.OpenForWriting(shardPath);
            results = Reattribution.RunShard(reading, document, models.Epochs, request, shard, shardStore, terminal ? new TerminalProgress(error) : null);
        }
        finally
        {
            if (terminal)
                error.WriteLine();
        }
        int stored = results.Count(r => r.Outcome == ReattributionOutcome.Stored);
        string epochs = results.Count == 0 ? "no epochs (more shards than epochs)" : "epochs " + Shard.Describe(results.Select(r => r.Epoch));
        output.WriteLine($"run {DisplayText.Clean(document.Name)}, shard {shard}: {epochs}; {Formats.Integer(stored)} re-attributed with {attribution.Name}, stored as '{DisplayText.Clean(request.Name)}' in {DisplayText.Clean(shardPath)}");
        var already = results.Where(r => r.Outcome == ReattributionOutcome.AlreadyStored).Select(r => r.Epoch).ToList();
        if (already.Count > 0)
            output.WriteLine($"  already there (in the store or this shard store), left as they were: epochs {Shard.Describe(already)}");
        var missing = results.Where(r => r.Outcome == ReattributionOutcome.NoSnapshot).Select(r => r.Epoch).ToList();
        if (missing.Count > 0)
            output.WriteLine($"  no weight snapshot, skipped: epochs {Shard.Describe(missing)}");
        WriteProblems(output, results);
        output.WriteLine($"  the store was only read; when every shard is done: driftwatch merge {Quote(folder)}/shard-*-of-{shard.Count.ToString(CultureInfo.InvariantCulture)}.litedb --into {Quote(path)}");
        return ExitCodes.Fine;
    }

    private static void WriteSummary(TextWriter output, RunDocument run, ReattributionOptions request, IAttributionMethod method, string models, IReadOnlyList<ReattributedEpoch> results, string store)
    {
        int stored = results.Count(r => r.Outcome == ReattributionOutcome.Stored);
        string settings = method.Settings.Count == 0 ? "" : " (" + string.Join(", ", method.Settings.Select(s => s.Key + "=" + s.Value)) + ")";
        output.WriteLine($"run {DisplayText.Clean(run.Name)}: {Formats.Integer(stored)} of {Formats.Integer(results.Count)} epochs re-attributed with {method.Name}{DisplayText.Clean(settings)}, stored as '{DisplayText.Clean(request.Name)}'");
        output.WriteLine($"  {models}; {results.Sum(r => r.Seconds).ToString("0.0", CultureInfo.InvariantCulture)} s");
        var already = results.Where(r => r.Outcome == ReattributionOutcome.AlreadyStored).Select(r => r.Epoch).ToList();
        if (already.Count > 0)
            output.WriteLine($"  already stored under that name, left as they were: epochs {Shard.Describe(already)}");
        var missing = results.Where(r => r.Outcome == ReattributionOutcome.NoSnapshot).Select(r => r.Epoch).ToList();
        if (missing.Count > 0)
            output.WriteLine($"  no weight snapshot, skipped: epochs {Shard.Describe(missing)}");
        WriteProblems(output, results);
        output.WriteLine($"  see them with: driftwatch show {Quote(run.Name)} --method {Quote(request.Name)} --store {Quote(store)}");
        output.WriteLine("  Attributions describe the model, not causes in the data.");
    }

    // The run's models: each epoch's TorchScript snapshot in its run folder, or the weight snapshots in the store loaded
    // into a model its recorded factory rebuilds.
    private sealed class Models : IDisposable
    {
        private readonly IWatchedModel? _rebuilt;

        private Models(EpochModels epochs, string description, IWatchedModel? rebuilt)
        {
            Epochs = epochs;
            Description = description;
            _rebuilt = rebuilt;
        }

        public EpochModels Epochs { get; }

        public string Description { get; }

        public static Models Of(RunDocument run, string? assemblyPath, string? runFolder)
        {
            if (runFolder is not null || run.ModelFactory.Length == 0)
            {
                if (FolderSnapshots.Of(run, runFolder) is { } folder)
                    return new Models(folder, $"each epoch's TorchScript snapshot in run folder {DisplayText.Clean(folder.Path)} is its model", null);
            }
            var factory = ModelFactories.Resolve(run.Name, run.ModelFactory, assemblyPath, IsFollowed(run));
            var model = ModelRecipe.Build(factory, run.ModelSettings);
            return new Models(new StoredWeights(model), $"model rebuilt by {DisplayText.Clean(factory.FullName ?? factory.Name)} from the run's settings", model);
        }

        // Runs followed before the folder was recorded say so in their description only.
        public static bool IsFollowed(RunDocument run) => run.RunFolder is not null || run.Description.StartsWith("followed from ", StringComparison.Ordinal);

        public void Dispose()
        {
            Epochs.Release();
            _rebuilt?.Module.Dispose();
        }
    }

    // What went wrong without stopping an epoch: a declared entry layer that failed its check.
    private static void WriteProblems(TextWriter output, IReadOnlyList<ReattributedEpoch> results)
    {
        var problems = results.SelectMany(r => r.Problems).ToList();
        foreach (string problem in problems)
            output.WriteLine($"  problem: {DisplayText.Clean(problem)}");
        if (problems.Count > 0)
            output.WriteLine("  at those epochs the whole model was attributed, as the monitor does; fix the model's entry layer declaration to attribute through it");
    }

    // Parses KEY=VALUE settings; a key given twice keeps its last value.
    private static List<(string Key, string Value)> ParseSettings(string[] settings)
    {
        var parsed = new List<(string, string)>();
        foreach (string setting in settings)
        {
            int equals = setting.IndexOf('=', StringComparison.Ordinal);
            if (equals <= 0)
                throw new DriftWatchException($"--setting must be KEY=VALUE, e.g. steps=128; got '{DisplayText.Clean(setting)}'");
            parsed.Add((setting[..equals].Trim(), setting[(equals + 1)..].Trim()));
        }
        return parsed;
    }

    /// <summary>Parses <c>A..B</c>, <c>A..</c>, <c>..B</c> or <c>N</c> into an inclusive range.</summary>
    internal static (int First, int Last) ParseEpochs(string? text)
    {
        if (text is null)
            return (int.MinValue, int.MaxValue);
        string problem = $"--epochs must be A..B, A.., ..B or one epoch N with whole numbers from 0; got '{DisplayText.Clean(text)}'";
        int dots = text.IndexOf("..", StringComparison.Ordinal);
        static bool Number(string part, out int value) =>
            int.TryParse(part, NumberStyles.None, CultureInfo.InvariantCulture, out value);
        if (dots < 0)
            return Number(text.Trim(), out int single) ? (single, single) : throw new DriftWatchException(problem);
        string left = text[..dots].Trim(), right = text[(dots + 2)..].Trim();
        if (left.Length == 0 && right.Length == 0)
            throw new DriftWatchException(problem);
        int first = int.MinValue, last = int.MaxValue;
        if (left.Length > 0 && !Number(left, out first))
            throw new DriftWatchException(problem);
        if (right.Length > 0 && !Number(right, out last))
            throw new DriftWatchException(problem);
        if (first > last)
            throw new DriftWatchException($"--epochs {DisplayText.Clean(text)} is empty: {first} comes after {last}");
        return (first, last);
    }

    private static string Quote(string text) =>
        text.Length > 0 && text.All(c => char.IsAsciiLetterOrDigit(c) || "-_./:=+,@".Contains(c, StringComparison.Ordinal))
            ? text
            : "'" + text.Replace("'", "'\\''", StringComparison.Ordinal) + "'";

    // Rewrites one stderr line per epoch, so a long re-attribution shows where it is.
    private sealed class TerminalProgress(TextWriter error) : IProgress<ReattributedEpoch>
    {
        public void Report(ReattributedEpoch value)
        {
            string what = value.Outcome switch
            {
                ReattributionOutcome.Stored => value.Seconds.ToString("0.0", CultureInfo.InvariantCulture) + " s",
                ReattributionOutcome.AlreadyStored => "already stored",
                _ => "no snapshot",
            };
            error.Write($"\rre-attributing: epoch {Formats.Integer(value.Epoch)} ({Formats.Integer(value.Index)} of {Formats.Integer(value.Count)}) {what}      ");
            error.Flush();
        }
    }
}
