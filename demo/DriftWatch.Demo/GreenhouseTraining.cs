using System.Diagnostics;
using System.Globalization;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Probing;
using DriftWatch.Storage;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Demo;

/// <summary>Trains the greenhouse model with the monitor attached, one printed line per epoch.</summary>
internal static class GreenhouseTraining
{
    /// <summary>Validation rows of every demo scenario.</summary>
    internal const int ValidationRows = 1000;

    /// <summary>Runs the demo and returns the process exit code.</summary>
    /// <exception cref="DriftWatchException">The store cannot be used, or the run name is taken.</exception>
    public static int Run(DemoOptions options, TextWriter output)
    {
        var total = Stopwatch.StartNew();
        // Running the demo again starts a new run beside the old one, unless --resume continues it or --run names it.
        string? taken = null;
        if (!options.Resume && !options.RunNamed && RunExists(Path.GetFullPath(options.StorePath), options.RunName))
        {
            taken = options.RunName;
            options = options with { RunName = FreeName(Path.GetFullPath(options.StorePath), options.RunName) };
        }
        var scenario = ScenarioBuilder.For(options.Variant)
            .WithSeed(options.Seed)
            .WithTrainingRows(options.Rows)
            .WithValidationRows(ValidationRows)
            .Build();

        torch.manual_seed(options.Seed);
        using var model = GreenhouseNet.For(scenario);
        var probe = ProbeSet.Select(scenario.Validation.Rows, scenario.Training.Rows, options.ProbePerHalf, options.Seed);
        var monitorOptions = new MonitorOptions
        {
            StorePath = Path.GetFullPath(options.StorePath),
            RunName = options.RunName,
            Schema = model.Schema,
            Probe = probe,
            Methods = [new Attribution.IntegratedGradients(options.Steps)],
            // The first hidden layer's units, by layer conductance at half the IG steps: 64 units, a few milliseconds an epoch.
            WatchedLayers = [GreenhouseNet.FirstHiddenLayer],
            LayerMethods = [new Attribution.LayerConductance(Math.Max(8, options.Steps / 2))],
            TrainingValueCounts = scenario.TrainingValueCounts,
            Model = GreenhouseNetFactory.RecipeFor(model, scenario),
            WatchedModel = model,
            Description = string.Create(CultureInfo.InvariantCulture,
                $"DriftWatch demo, scenario {GreenhouseVariants.NameOf(options.Variant)}: {scenario.Describe()}. Model: embeddings {model.EmbeddingWidth} wide, MLP {model.Hidden}-{model.Hidden} ReLU, one logit; Adam lr {GreenhouseTrainer.LearningRate}, batch {GreenhouseTrainer.BatchSize}."),
        };

        // The monitor refuses a stored run without Resume too; checked here first so the refusal names the demo's option.
        int lastStored = StoredLastEpoch(monitorOptions.StorePath, options.RunName);
        if (lastStored >= 0 && !options.Resume)
        {
            throw new DriftWatchException(
                $"run '{options.RunName}' already has epochs up to {lastStored} in '{monitorOptions.StorePath}'; pass --resume to continue it, --run NAME for a new run, or delete the store file to start over");
        }
        using var monitor = new TrainingMonitor(monitorOptions with { Resume = options.Resume });
        var optimizerState = new OptimizerStateFiles(monitorOptions.StorePath, options.RunName, output);
        int firstEpoch = 1;
        string? resumed = null;
        if (monitor.LastEpoch >= 0)
        {
            // The weights come back from the store; the data order is replayed and Adam's state read back by the trainer.
            int restored = monitor.RestoreLastSnapshot(model);
            firstEpoch = restored + 1;
            resumed = optimizerState.Exists(restored)
                ? Invariant($"run '{options.RunName}' from epoch {restored}: weights from its snapshot, optimizer state from {optimizerState.Folder}")
                : Invariant($"run '{options.RunName}' from epoch {restored}: weights from its snapshot; no optimizer state found, Adam starts afresh");
        }
        else if (options.Resume)
        {
            resumed = $"run '{options.RunName}' has no complete epoch yet; it starts at epoch 1";
        }

        output.WriteLine($"scenario  {GreenhouseVariants.NameOf(options.Variant)}: {scenario.Describe()}");
        output.WriteLine(scenario.PlantedFaults.IsEmpty
            ? "planted   nothing that should be flagged"
            : $"planted   {string.Join(", ", scenario.PlantedFaults)} (should be flagged)");
        output.WriteLine(Invariant($"rule      a model that knew the grading rule would score validation loss {scenario.Validation.RuleLoss():F4}"));
        output.WriteLine(Invariant($"probe     {probe.HeldOutCount} held-out + {probe.TrainingCount} training rows, Integrated Gradients {options.Steps} steps; run '{options.RunName}'"));
        output.WriteLine(Invariant($"layer     {GreenhouseNet.FirstHiddenLayer} ({model.Hidden} units, first hidden ReLU): layer conductance {Math.Max(8, options.Steps / 2)} steps"));
        if (resumed is not null)
            output.WriteLine($"resumed   {resumed}");
        if (monitor.TookOver is not null)
            output.WriteLine($"writer    {monitor.TookOver}");
        if (taken is not null)
            output.WriteLine($"run       the store has run '{taken}' already; this is a new run beside it, '{options.RunName}' (--resume continues the old one)");
        if (firstEpoch > options.Epochs)
            output.WriteLine(Invariant($"          it already has {firstEpoch - 1} epochs, as many as --epochs {options.Epochs} asks; nothing to train"));
        output.WriteLine();

        int? firstHalt = null;
        var records = GreenhouseTrainer.Train(scenario, model, monitor, options.Epochs, options.Seed, stopOnHalt: !options.KeepTraining, firstEpoch: firstEpoch, optimizerState: optimizerState, onEpoch: record =>
        {
            output.WriteLine(Invariant(
                $"epoch {record.Epoch,3}  train loss {record.TrainLoss:F4}  validation loss {record.ValidationLoss:F4}  accuracy {record.Accuracy:F3}  verdict {record.Verdict.Kind,-8}  monitor {record.MonitorSeconds:F2} s"));
            foreach (var finding in record.Verdict.Findings)
                output.WriteLine($"          {finding.Severity.ToString().ToLowerInvariant()}: {finding.Evidence}");
            if (record.Verdict.Kind == VerdictKind.Halt && firstHalt is null)
            {
                firstHalt = record.Epoch;
                output.WriteLine(options.KeepTraining
                    ? Invariant($"          the gate advises stopping here (epoch {record.Epoch}); training goes on to show the run's story (--stop-at-halt stops here)")
                    : Invariant($"          the gate advises stopping; training stops at epoch {record.Epoch}"));
            }
        });

        // Over every stored epoch, so a resumed run reports the whole run and not only this session.
        using var reading = RunStore.OpenForReading(monitorOptions.StorePath);
        var stored = reading.Epochs(monitor.Run.Id)
            .Where(e => e.Metrics.ContainsKey(EpochMetrics.ValidationLossKey))
            .ToList();
        output.WriteLine();
        if (stored.Count > 0)
        {
            var best = stored.MinBy(e => e.Metrics[EpochMetrics.ValidationLossKey])!;
            output.WriteLine(Invariant(
                $"lowest validation loss {best.Metrics[EpochMetrics.ValidationLossKey]:F4} at epoch {best.Epoch}; {records.Count} epochs trained in {total.Elapsed.TotalSeconds:F1} s, {stored.Count} in the store"));
        }
        var stoppedAt = reading.Verdicts(monitor.Run.Id).Where(v => v.Kind == nameof(VerdictKind.Halt)).Select(v => (int?)v.Epoch).Min();
        if (options.KeepTraining && stoppedAt is int stop)
            output.WriteLine(Invariant($"gate      first Halt at epoch {stop}: stopping on Halt would have ended the run there (marked on every chart)"));
        var (evidence, chart) = RenderCharts(reading, options.RunName, monitorOptions.StorePath);
        string validation = WriteValidationRows(scenario, model.Schema, options.RunName, monitorOptions.StorePath);
        string store = Quote(monitorOptions.StorePath);
        string run = Quote(options.RunName);
        output.WriteLine($"store     {monitorOptions.StorePath}");
        if (evidence is not null)
            output.WriteLine($"evidence  {evidence.Value.Path} ({evidence.Value.What})");
        output.WriteLine($"chart     {chart}");
        output.WriteLine($"rows      {validation} (the {ValidationRows} validation rows, labelled, for a pruning what-if)");
        string driftwatch = CliCommand.Prefix(Environment.CurrentDirectory, Environment.GetEnvironmentVariable("PATH"), out string? publishFirst);
        output.WriteLine("next      see what the monitor recorded:");
        if (publishFirst is not null)
            output.WriteLine($"          {publishFirst}   # once: builds the command line (README, Set-up)");
        output.WriteLine($"          {driftwatch} runs --store {store}");
        output.WriteLine($"          {driftwatch} show {run} --store {store}");
        output.WriteLine($"          {driftwatch} chart {run} --store {store}");
        output.WriteLine($"          {driftwatch} neurons {run} --layer {GreenhouseNet.FirstHiddenLayer} --store {store}");
        return 0;
    }

    // The trend chart beside the store: share of importance per feature over the epochs, losses beneath.
    // The last complete epoch of the run with exactly this name, −1 when the store or the run is not there; reads only.
    private static int StoredLastEpoch(string storePath, string runName)
    {
        if (!File.Exists(storePath))
            return -1;
        using var reading = RunStore.OpenForReading(storePath);
        var run = reading.FindRun(runName);
        return run is null ? -1 : reading.Epochs(run.Id).Select(e => e.Epoch).DefaultIfEmpty(-1).Max();
    }

    // The evidence chart of the run's most severe finding (when it has one) and the trend chart, beside the store.
    private static ((string Path, string What)? Evidence, string Trend) RenderCharts(RunStore store, string runName, string storePath)
    {
        var history = Charts.RunHistory.Load(store, runName, rowsOfFlagged: true);
        string folder = Path.Combine(Path.GetDirectoryName(storePath)!, "charts");
        Directory.CreateDirectory(folder);
        string path = Path.Combine(folder, Charts.ChartFiles.FileName(runName, "trend", history.Method));
        new Charts.TrendChart().Render(history, path, Charts.ChartSize.Default);
        if (Charts.ChartCatalog.MostSevere(history) is not { } worst)
            return (null, path);
        var evidence = new Charts.EvidenceChart(worst.Kind);
        var (kind, feature) = evidence.Choose(history);
        string evidencePath = Path.Combine(folder, Charts.ChartFiles.FileName(runName, evidence.Name, history.Method));
        evidence.Render(history, evidencePath, Charts.ChartSize.Default);
        string what = $"evidence of the most severe finding: {worst.Severity} for {kind.Info.PlainWords}{(feature is null ? "" : $" of '{feature}'")}";
        return ((evidencePath, what), path);
    }

    // The first of NAME-2, NAME-3, … the store does not have.
    private static string FreeName(string storePath, string runName)
    {
        for (int suffix = 2; ; suffix++)
        {
            string name = Invariant($"{runName}-{suffix}");
            if (!RunExists(storePath, name))
                return name;
        }
    }

    private static bool RunExists(string storePath, string runName)
    {
        if (!File.Exists(storePath))
            return false;
        using var reading = RunStore.OpenForReading(storePath);
        return reading.FindRun(runName) is not null;
    }

    // The validation rows as CSV beside the store (dense features, categorical ids, label), so `driftwatch prune` can
    // measure a pruned model on more rows than the probe set's held-out half.
    private static string WriteValidationRows(Greenhouse.GreenhouseScenario scenario, Model.FeatureSchema schema, string runName, string storePath)
    {
        string path = Path.Combine(Path.GetDirectoryName(storePath)!, Charts.ChartFiles.SafePart(runName) + "-validation.csv");
        var rows = scenario.Validation.Rows;
        var names = schema.Features.Where(f => f.Kind == Model.FeatureKind.Dense).Select(f => f.Name)
            .Concat(schema.Features.Where(f => f.Kind == Model.FeatureKind.Categorical).Select(f => f.Name))
            .Append("label");
        var text = new System.Text.StringBuilder();
        text.AppendJoin(',', names.Select(CsvCell)).Append('\n');
        for (int r = 0; r < rows.Count; r++)
        {
            var cells = Enumerable.Range(0, rows.DenseCount).Select(d => rows.Dense[r * rows.DenseCount + d].ToString("R", CultureInfo.InvariantCulture))
                .Concat(Enumerable.Range(0, rows.CategoricalCount).Select(c => rows.Categorical[r * rows.CategoricalCount + c].ToString(CultureInfo.InvariantCulture)))
                .Append(rows.Labels![r].ToString("R", CultureInfo.InvariantCulture));
            text.AppendJoin(',', cells).Append('\n');
        }
        OutputFile.WriteText(path, text.ToString());
        return path;
    }

    private static string CsvCell(string text) =>
        text.IndexOfAny([',', '"', '\n', '\r']) < 0 ? text : "\"" + text.Replace("\"", "\"\"", StringComparison.Ordinal) + "\"";

    private static string Invariant(FormattableString text) => text.ToString(CultureInfo.InvariantCulture);

    // Paths and run names are printed as commands to copy; quote them for a POSIX shell when they need it.
    private static string Quote(string text) =>
        text.Length > 0 && text.All(c => char.IsAsciiLetterOrDigit(c) || "-_./:=+,@".Contains(c, StringComparison.Ordinal))
            ? text
            : "'" + text.Replace("'", "'\\''", StringComparison.Ordinal) + "'";
}
