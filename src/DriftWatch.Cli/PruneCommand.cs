using System.CommandLine;
using System.Globalization;
using System.Text.Json;
using DriftWatch.Charts;
using DriftWatch.Layers;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch prune RUN --layer L --epoch E</c>: what masking a fraction of a layer's units would do, measured on labelled rows.</summary>
internal static class PruneCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var layerOptions = new LayerOptions();
        var epoch = new Option<int?>("--epoch")
        {
            Description = "The epoch whose weight snapshot and layer map are used. Default: the last epoch that has both.",
            HelpName = "N",
        };
        var fraction = LayerOptions.Number("--fraction", "The fraction of the layer's units each choice masks (rounded, at least one unit; above 0, below 1).", 0.15, 0, 0.99, above: true);
        var seeds = CommonOptions.Bounded("--seeds", "How many random choices to draw (seeds 1, 2, …); their mean and standard deviation are reported (1 to 100).", 5, 1, 100);
        var threshold = LayerOptions.Number("--threshold", "A row is predicted positive (label 1) when the model's probability is at least this (above 0, below 1).", 0.5, 0, 0.999999, above: true);
        var data = new Option<string?>("--data")
        {
            Description = "A CSV of labelled rows to measure on: a header naming every feature of the run and label (0 or 1), then one row a line. Default: the held-out half of the run's probe set.",
            HelpName = "FILE",
        };
        var assembly = new Option<string?>("--model-assembly")
        {
            Description = "The .dll holding the run's model factory, when it is not part of DriftWatch; the only outside code this command runs.",
            HelpName = "PATH",
        };
        var json = CommonOptions.Json("the what-if (every choice's masked units, confusion matrices, figures and changes)");

        var command = new Command(
            "prune",
            "Measure what masking a fraction of one layer's units would do (a what-if; the store and the weights are not changed). "
            + "The model is rebuilt with the factory the run recorded and loaded with the chosen epoch's snapshot; the units are "
            + "chosen three ways — importance-guided (the layer map's consistently negative units first, then the least conductance), "
            + "at random (several seeds: mean and spread) and smallest incoming weights (L1 norm) — and each pruned model is "
            + "compared with the unpruned one: confusion matrix, precision, recall, F1 and accuracy at the decision threshold. "
            + "Measured on the rows given, not promised for other data.\n"
            + "Examples:\n"
            + "  driftwatch prune night-7 --layer _scorer.1 --epoch 6 --data validation.csv\n"
            + "  driftwatch prune night-7 --fraction 0.25 --seeds 10 --threshold 0.4 --json\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "done"),
                (ExitCodes.BadInput, "bad input (missing or foreign store, unknown run, layer or epoch, a model or snapshot that does not fit, a bad data file), nothing changed"),
                (ExitCodes.InternalError, "internal error")))
        {
            run,
            epoch,
            fraction,
            seeds,
            threshold,
            data,
            assembly,
            json,
        };
        layerOptions.AddTo(command);
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            var options = new PruningOptions
            {
                Fraction = parse.GetValue(fraction),
                Seeds = parse.GetValue(seeds),
                Threshold = parse.GetValue(threshold),
            };
            options.Validate();
            RunDocument document;
            LayerMapDocument map;
            MemoryStream weights;
            string layerPath, method;
            using (var runStore = CommonOptions.OpenStore(parse, store))
            {
                document = runStore.GetRun(parse.GetValue(run)!);
                (layerPath, method) = layerOptions.Choose(parse, runStore, document);
                var maps = LayerOptions.Maps(runStore, document, layerPath, method);
                var snapshots = runStore.Epochs(document.Id).Where(e => e.SnapshotId is not null).ToDictionary(e => e.Epoch, e => e.SnapshotId!);
                var usable = maps.Where(m => snapshots.ContainsKey(m.Epoch)).ToList();
                if (usable.Count == 0)
                    throw new DriftWatchException($"run '{DisplayText.Clean(document.Name)}' has no epoch with both a weight snapshot and a layer map of '{DisplayText.Clean(layerPath)}'");
                int wanted = parse.GetValue(epoch) ?? usable[^1].Epoch;
                map = usable.FirstOrDefault(m => m.Epoch == wanted)
                    ?? throw new DriftWatchException($"epoch {wanted} of run '{DisplayText.Clean(document.Name)}' has no weight snapshot and layer map of '{DisplayText.Clean(layerPath)}'; epochs that have both: {string.Join(", ", usable.Select(m => Formats.Integer(m.Epoch)))}");
                weights = runStore.ReadSnapshot(snapshots[wanted]);
            }
            var audit = NeuronAudit.Run([map], document.Target, layerOptions.AuditOptions(parse));
            string? dataPath = parse.GetValue(data);
            var rows = dataPath is null ? EvaluationRows.HeldOut(document) : EvaluationRows.Read(dataPath, document);
            var factory = ModelFactories.Resolve(document.Name, document.ModelFactory, parse.GetValue(assembly));
            var model = ModelRecipe.Build(factory, document.ModelSettings);
            PruningReport report;
            try
            {
                using (weights)
                    Snapshots.LoadInto(model.Module, weights, $"the snapshot of epoch {map.Epoch} of run '{DisplayText.Clean(document.Name)}'");
                var layer = WatchedLayer.Find(model.Module, layerPath);
                report = PruningWhatIf.Run(model, layer, rows, AttributionTarget.Parse(document.Target), audit.Overall, options);
            }
            finally
            {
                model.Module.Dispose();
            }
            string source = dataPath is null ? $"the held-out half of the probe set ({Formats.Integer(rows.Count)} rows)" : $"{DisplayText.Clean(Path.GetFullPath(dataPath))} ({Formats.Integer(rows.Count)} rows)";
            if (parse.GetValue(json))
                WriteJson(output, document, map, audit, report, dataPath);
            else
                WriteText(output, document, map, audit, report, source);
            return ExitCodes.Fine;
        });
        return command;
    }

    private static void WriteText(TextWriter output, RunDocument run, LayerMapDocument map, NeuronAudit audit, PruningReport report, string source)
    {
        var o = report.Options;
        output.WriteLine($"run {DisplayText.Clean(run.Name)}, epoch {Formats.Integer(map.Epoch)}, layer {DisplayText.Clean(report.Layer)}: {Formats.Integer(report.Masked)} of {Formats.Integer(report.Units)} units masked ({Formats.Percent(o.Fraction)} asked) by each choice");
        output.WriteLine($"measured on {source}; a row is predicted 1 when the probability is at least {o.Threshold.ToString("0.###", CultureInfo.InvariantCulture)}");
        output.WriteLine($"importance from {DisplayText.Clean(map.Method)} at epoch {Formats.Integer(map.Epoch)} over {Formats.Integer(audit.Rows)} probe rows: "
            + string.Join(", ", Enum.GetValues<NeuronClass>().Select(k => $"{Formats.Integer(audit.Count(k))} {NeuronAudit.Label(k)}")));
        output.WriteLine($"weight magnitude: L1 norm of each unit's row of {DisplayText.Clean(report.WeightSource)}; random: {Formats.Integer(o.Seeds)} seeds from {Formats.Integer(o.Seed)} (mean ± standard deviation)");
        output.WriteLine();

        var table = new TextTable("choice", ">TP", ">FP", ">TN", ">FN", ">precision", ">recall", ">F1", ">accuracy", ">Δ precision", ">Δ recall", ">Δ F1", ">Δ accuracy");
        foreach (var result in report.Choices.Prepend(report.Unpruned))
        {
            bool several = result.Matrices.Count > 1;
            string Count(Func<ConfusionMatrix, int> cell) => several
                ? result.Matrices.Average(m => cell(m)).ToString("0.0", CultureInfo.InvariantCulture)
                : Formats.Integer(cell(result.Matrices[0]));
            string Figure(double mean, double spread) => mean.ToString("0.000", CultureInfo.InvariantCulture) + (several ? " ± " + spread.ToString("0.000", CultureInfo.InvariantCulture) : "");
            string Change(double change) => result.Choice == PruningChoice.Unpruned ? "-" : change.ToString("+0.000;-0.000;0.000", CultureInfo.InvariantCulture);
            table.Add(
                PruningWhatIf.Label(result.Choice) + (several ? $" ({Formats.Integer(result.Matrices.Count)} seeds)" : ""),
                Count(m => m.TruePositives),
                Count(m => m.FalsePositives),
                Count(m => m.TrueNegatives),
                Count(m => m.FalseNegatives),
                Figure(result.Mean.Precision, result.Spread.Precision),
                Figure(result.Mean.Recall, result.Spread.Recall),
                Figure(result.Mean.F1, result.Spread.F1),
                Figure(result.Mean.Accuracy, result.Spread.Accuracy),
                Change(result.Change.Precision),
                Change(result.Change.Recall),
                Change(result.Change.F1),
                Change(result.Change.Accuracy));
        }
        table.Write(output);
        output.WriteLine();
        foreach (var result in report.Choices.Where(r => r.Choice != PruningChoice.Random))
            output.WriteLine($"masked, {PruningWhatIf.Label(result.Choice)}: units {string.Join(", ", result.MaskedUnits[0].Select(Formats.Integer))}");
        output.WriteLine("A what-if measured once on these rows: it says what masking did here, not what it will do on other data, and the layer map describes the model, not causes.");
    }

    private static void WriteJson(TextWriter output, RunDocument run, LayerMapDocument map, NeuronAudit audit, PruningReport report, string? dataPath)
    {
        static object Figures(MetricSet m) => new { precision = m.Precision, recall = m.Recall, f1 = m.F1, accuracy = m.Accuracy };
        var document = new Dictionary<string, object?>
        {
            ["run"] = run.Name,
            ["epoch"] = map.Epoch,
            ["layer"] = report.Layer,
            ["method"] = map.Method,
            ["units"] = report.Units,
            ["masked"] = report.Masked,
            ["fraction"] = report.Options.Fraction,
            ["threshold"] = report.Options.Threshold,
            ["rows"] = report.Rows,
            ["data"] = dataPath is null ? "probe held-out half" : Path.GetFullPath(dataPath),
            ["weightSource"] = report.WeightSource,
            ["classes"] = Enum.GetValues<NeuronClass>().ToDictionary(NeuronAudit.Label, audit.Count),
            ["choices"] = report.Choices.Prepend(report.Unpruned).Select(r => new Dictionary<string, object>
            {
                ["choice"] = PruningWhatIf.Label(r.Choice),
                ["maskedUnits"] = r.MaskedUnits,
                ["matrices"] = r.Matrices.Select(m => new { truePositives = m.TruePositives, falsePositives = m.FalsePositives, trueNegatives = m.TrueNegatives, falseNegatives = m.FalseNegatives }).ToList(),
                ["mean"] = Figures(r.Mean),
                ["spread"] = Figures(r.Spread),
                ["change"] = Figures(r.Change),
            }).ToList(),
        };
        output.WriteLine(JsonSerializer.Serialize(document, JsonText.Indented));
    }
}
