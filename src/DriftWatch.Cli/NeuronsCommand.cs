using System.CommandLine;
using System.Globalization;
using System.Text.Json;
using DriftWatch.Charts;
using DriftWatch.Layers;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch neurons RUN --layer L</c>: the neuron audit of one watched layer, its table and its neuron map.</summary>
internal static class NeuronsCommand
{
    private const int MostChangesShown = 3;

    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var run = CommonOptions.Run();
        var layerOptions = new LayerOptions();
        var epoch = new Option<int?>("--epoch")
        {
            Description = "Audit this epoch only (the tables); the neuron map still shows every epoch. Default: every epoch with layer maps, pooled.",
            HelpName = "N",
        };
        var half = new Option<string>("--half")
        {
            Description = "Which probe rows to audit: both halves, held-out or training.",
            HelpName = "HALF",
            DefaultValueFactory = _ => "both",
        };
        half.AcceptOnlyFromAmong("both", "held-out", "training");
        var colour = new Option<string>("--colour")
        {
            Description = "What the neuron map's cells show: class (orange consistently negative, light grey inactive, mid grey mixed, blue positive) or conductance (mean conductance, orange below zero, blue above).",
            HelpName = "VALUE",
            DefaultValueFactory = _ => "class",
        };
        colour.AcceptOnlyFromAmong("class", "conductance");
        var noChart = new Option<bool>("--no-chart") { Description = "Print the tables only; draw no neuron map." };
        var width = CommonOptions.Width();
        var height = CommonOptions.Height();
        var output = CommonOptions.OutputFolder(ChartCommand.DefaultFolder, "The folder to write the neuron map to; created when missing.");
        var json = CommonOptions.Json("the audit (thresholds, class counts per epoch, every unit's figures and class changes, the chart's path)");

        var command = new Command(
            "neurons",
            "Audit the units of a layer the run watched: for each unit, the fraction of probe rows where its conductance pushes "
            + "for the class the model predicts, against it, or is near zero, and the class that gives — consistently negative, "
            + "inactive, mixed or positive — over every epoch and at each epoch, with the units whose class changed. Draws a neuron "
            + "map (units × epochs). Conductance describes the model, not causes in the data; a consistently negative unit is a "
            + "lead to look at, not a fault proven. 'prune' measures what masking units would do.\n"
            + "Examples:\n"
            + "  driftwatch neurons night-7 --layer _scorer.1\n"
            + "  driftwatch neurons night-7 --layer _scorer.1 --epoch 6 --colour conductance\n"
            + "  driftwatch neurons night-7 --json --no-chart | jq '.counts'\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            run,
            epoch,
            half,
            colour,
            noChart,
            width,
            height,
            output,
            json,
        };
        layerOptions.AddTo(command);
        command.SetAction(parse =>
        {
            var writer = parse.InvocationConfiguration.Output;
            var options = layerOptions.AuditOptions(parse);
            RunDocument document;
            IReadOnlyList<LayerMapDocument> maps;
            string layer, method;
            using (var runStore = CommonOptions.OpenStore(parse, store))
            {
                document = runStore.GetRun(parse.GetValue(run)!);
                (layer, method) = layerOptions.Choose(parse, runStore, document);
                maps = LayerOptions.Maps(runStore, document, layer, method);
            }
            var rows = parse.GetValue(half) switch
            {
                "held-out" => Enumerable.Range(0, document.HeldOutRows).ToList(),
                "training" => Enumerable.Range(document.HeldOutRows, document.TrainingRows).ToList(),
                _ => null,
            };
            var all = NeuronAudit.Run(maps, document.Target, options, rows);
            var scoped = all;
            if (parse.GetValue(epoch) is int chosen)
            {
                var one = maps.Where(m => m.Epoch == chosen).ToList();
                if (one.Count == 0)
                    throw new DriftWatchException($"run '{DisplayText.Clean(document.Name)}' has no '{DisplayText.Clean(method)}' map of layer '{DisplayText.Clean(layer)}' at epoch {chosen}; it has epochs {Range(all.Epochs)}");
                scoped = NeuronAudit.Run(one, document.Target, options, rows);
            }

            string? chart = null;
            if (!parse.GetValue(noChart))
            {
                var picture = new NeuronMapChart(NeuronMapChart.Parse(parse.GetValue(colour)!));
                int h = parse.GetResult(height) is null or { Implicit: true } ? NeuronMapChart.ReadableHeight(all.Units, parse.GetValue(height)) : parse.GetValue(height);
                string folder = CommonOptions.Folder(parse.GetValue(output)!);
                chart = Path.Combine(folder, $"{ChartFiles.SafePart(document.Name)}-{picture.Name}-{ChartFiles.SafePart(layer)}-{ChartFiles.SafePart(method)}.png");
                picture.Render(all, document.Name, chart, new ChartSize(parse.GetValue(width), h));
            }
            string halfName = parse.GetValue(half)!;
            if (parse.GetValue(json))
                WriteJson(writer, document, maps, all, scoped, halfName, chart);
            else
                WriteText(writer, document, maps, all, scoped, halfName, chart);
            return ExitCodes.Fine;
        });
        return command;
    }

    private static void WriteText(TextWriter output, RunDocument run, IReadOnlyList<LayerMapDocument> maps, NeuronAudit all, NeuronAudit scoped, string half, string? chart)
    {
        var sample = maps[0];
        string settings = sample.Settings.Count == 0 ? "" : " (" + string.Join(", ", sample.Settings.OrderBy(s => s.Key, StringComparer.Ordinal).Select(s => s.Key + "=" + s.Value)) + ")";
        output.WriteLine($"run {DisplayText.Clean(run.Name)}, layer {DisplayText.Clean(all.Layer)} ({Formats.Integer(all.Units)} units), {DisplayText.Clean(all.Method + settings)}, target {DisplayText.Clean(run.Target)}");
        output.WriteLine($"{Formats.Integer(all.Epochs.Count)} epochs with layer maps ({Range(all.Epochs)}), {Formats.Integer(all.Rows)} probe rows each ({(half == "both" ? "both halves" : half + " half")}); "
            + string.Create(CultureInfo.InvariantCulture, $"{maps.Average(m => m.Seconds):0.000} s and {maps.Average(m => (double)m.Evaluations):N0} model evaluations per epoch"));
        output.WriteLine(LayerOptions.Describe(all));
        output.WriteLine();

        string scope = scoped.Epochs.Count == 1 ? $"at epoch {Formats.Integer(scoped.Epochs[0])}" : $"over epochs {Range(scoped.Epochs)}, rows pooled";
        output.WriteLine($"Classes {scope}:");
        var classes = new TextTable("class", ">units", ">share");
        foreach (var kind in Enum.GetValues<NeuronClass>())
            classes.Add(NeuronAudit.Label(kind), Formats.Integer(scoped.Count(kind)), Formats.Percent((double)scoped.Count(kind) / scoped.Units));
        classes.Write(output);
        output.WriteLine();

        output.WriteLine("Classes at each epoch (changed: units whose class differs from the epoch before):");
        var perEpoch = new TextTable(">epoch", ">consistently negative", ">inactive", ">mixed", ">positive", ">changed");
        for (int e = 0; e < all.Epochs.Count; e++)
        {
            int epochNumber = all.Epochs[e];
            perEpoch.Add(
                Formats.Integer(epochNumber),
                Formats.Integer(all.Count(NeuronClass.ConsistentlyNegative, e)),
                Formats.Integer(all.Count(NeuronClass.Inactive, e)),
                Formats.Integer(all.Count(NeuronClass.Mixed, e)),
                Formats.Integer(all.Count(NeuronClass.Positive, e)),
                e == 0 ? "-" : Formats.Integer(all.Changes.Count(c => c.Epoch == epochNumber)));
        }
        perEpoch.Write(output);
        output.WriteLine();

        output.WriteLine($"Units {scope} (consistently negative first; conductance in {DisplayText.Clean(run.Target)} units):");
        var units = new TextTable(">unit", "class", ">positive", ">negative", ">near zero", ">mean conductance", "class changes across epochs");
        foreach (int u in NeuronMapChart.Order(scoped))
        {
            var figures = scoped.Overall[u];
            var changes = all.Changes.Where(c => c.Unit == u).ToList();
            string changed = changes.Count == 0 ? "none"
                : string.Join("; ", changes.Take(MostChangesShown).Select(c => $"{Formats.Integer(c.Epoch)}: {NeuronAudit.Label(c.From)} → {NeuronAudit.Label(c.To)}"))
                    + (changes.Count > MostChangesShown ? $"; {Formats.Integer(changes.Count - MostChangesShown)} more" : "");
            units.Add(
                Formats.Integer(u),
                NeuronAudit.Label(figures.Class),
                Formats.Percent(figures.Positive),
                Formats.Percent(figures.Negative),
                Formats.Percent(figures.NearZero),
                figures.MeanConductance.ToString("+0.0000;-0.0000;0.0000", CultureInfo.InvariantCulture),
                changed);
        }
        units.Write(output);
        output.WriteLine();
        if (chart is not null)
            output.WriteLine($"neuron map: {chart}");
        output.WriteLine("Conductance describes the model, not causes in the data: a consistently negative or inactive unit is a lead, not a fault proven.");
    }

    private static void WriteJson(TextWriter output, RunDocument run, IReadOnlyList<LayerMapDocument> maps, NeuronAudit all, NeuronAudit scoped, string half, string? chart)
    {
        var sample = maps[0];
        static string Name(NeuronClass kind) => NeuronAudit.Label(kind);
        var document = new Dictionary<string, object?>
        {
            ["run"] = run.Name,
            ["layer"] = all.Layer,
            ["method"] = all.Method,
            ["settings"] = sample.Settings,
            ["target"] = run.Target,
            ["units"] = all.Units,
            ["rowsPerEpoch"] = all.Rows,
            ["half"] = half,
            ["thresholds"] = all.Options.ToSettings(),
            ["epochs"] = all.Epochs,
            ["scope"] = scoped.Epochs.Count == 1 ? new { epoch = (int?)scoped.Epochs[0] } : new { epoch = (int?)null },
            ["counts"] = Enum.GetValues<NeuronClass>().ToDictionary(Name, scoped.Count),
            ["perEpoch"] = all.Epochs.Select((epoch, e) => new Dictionary<string, object>
            {
                ["epoch"] = epoch,
                ["counts"] = Enum.GetValues<NeuronClass>().ToDictionary(Name, k => all.Count(k, e)),
                ["changed"] = e == 0 ? 0 : all.Changes.Count(c => c.Epoch == epoch),
                ["seconds"] = maps.First(m => m.Epoch == epoch).Seconds,
            }).ToList(),
            ["unitFigures"] = scoped.Overall.Select(u => new Dictionary<string, object>
            {
                ["unit"] = u.Unit,
                ["class"] = Name(u.Class),
                ["positive"] = u.Positive,
                ["negative"] = u.Negative,
                ["nearZero"] = u.NearZero,
                ["meanConductance"] = u.MeanConductance,
                ["meanAbsolute"] = u.MeanAbsolute,
                ["classByEpoch"] = all.ByEpoch.Select(e => Name(e[u.Unit].Class)).ToList(),
                ["changes"] = all.Changes.Where(c => c.Unit == u.Unit).Select(c => new { epoch = c.Epoch, from = Name(c.From), to = Name(c.To) }).ToList(),
            }).ToList(),
            ["chart"] = chart,
        };
        output.WriteLine(JsonSerializer.Serialize(document, JsonText.Indented));
    }

    private static string Range(IReadOnlyList<int> epochs) =>
        epochs.Count == 1 ? Formats.Integer(epochs[0]) : $"{Formats.Integer(epochs[0])}–{Formats.Integer(epochs[^1])}";
}
