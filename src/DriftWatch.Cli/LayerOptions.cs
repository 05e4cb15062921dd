using System.CommandLine;
using System.Globalization;
using DriftWatch.Charts;
using DriftWatch.Layers;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary>Options and look-ups shared by <c>neurons</c> and <c>prune</c>: which layer maps to read and the audit's thresholds.</summary>
internal sealed class LayerOptions
{
    /// <summary>The layer method read when the run has it.</summary>
    public const string DefaultMethod = "layer-conductance";

    public Option<string?> Layer { get; } = new("--layer")
    {
        Description = "The layer, by the module path the run watched (e.g. _scorer.1). Default: the run's only watched layer.",
        HelpName = "PATH",
    };

    public Option<string?> Method { get; } = new("--method")
    {
        Description = $"The layer method whose maps to read. Default: {DefaultMethod} when stored, else the layer's only method.",
        HelpName = "NAME",
    };

    public Option<double> NearZero { get; } = Number("--near-zero", "A unit counts as near zero on a row when its conductance is at most this fraction of the row's mean absolute conductance over the layer's units (0 to 10).", 0.1, 0, 10);

    public Option<double> InactiveShare { get; } = Number("--inactive-share", "A unit is inactive when it is near zero on at least this fraction of rows (above 0, at most 1).", 0.9, 0, 1, above: true);

    public Option<double> ConsistentShare { get; } = Number("--consistent-share", "A unit is consistently negative (or positive) when at least this fraction of the rows where it is not near zero has that sign (above 0.5, at most 1).", 0.8, 0.5, 1, above: true);

    public Option<bool> RawSign { get; } = new("--raw-sign")
    {
        Description = "Read the sign of conductance as it is (toward a higher output) instead of toward the class the model predicts for each row.",
    };

    /// <summary>Adds the options to <paramref name="command"/>.</summary>
    public void AddTo(Command command)
    {
        command.Options.Add(Layer);
        command.Options.Add(Method);
        command.Options.Add(NearZero);
        command.Options.Add(InactiveShare);
        command.Options.Add(ConsistentShare);
        command.Options.Add(RawSign);
    }

    /// <summary>The audit thresholds given on the command line.</summary>
    public NeuronAuditOptions AuditOptions(ParseResult parse) => new()
    {
        NearZero = parse.GetValue(NearZero),
        InactiveShare = parse.GetValue(InactiveShare),
        ConsistentShare = parse.GetValue(ConsistentShare),
        TowardPrediction = !parse.GetValue(RawSign),
    };

    /// <summary>The layer and method to read: as given, or the run's only one.</summary>
    /// <exception cref="DriftWatchException">The run has no layer maps, or not of that layer or method.</exception>
    public (string Layer, string Method) Choose(ParseResult parse, RunStore store, RunDocument run)
    {
        var kinds = store.LayerMapKinds(run.Id);
        string name = DisplayText.Clean(run.Name);
        if (kinds.Count == 0 && (run.RunFolder is not null || run.Description.StartsWith("followed from ", StringComparison.Ordinal)))
        {
            throw new DriftWatchException($"run '{name}' was followed from a Python run folder, and follow attributes the features of its TorchScript snapshots, not their hidden layers; "
                + "the neuron audit and the pruning what-if need layer maps, which this version makes for C# runs only (docs/pytorch.md)");
        }
        if (kinds.Count == 0)
            throw new DriftWatchException($"run '{name}' has no layer maps; name layers in MonitorOptions.WatchedLayers when training (the demo watches {DemoLayer})");
        var layers = kinds.Select(k => k.Layer).Distinct().ToList();
        string? layer = parse.GetValue(Layer);
        if (layer is null)
        {
            if (layers.Count > 1)
                throw new DriftWatchException($"run '{name}' watched several layers; choose one with --layer: {DisplayText.Clean(string.Join(", ", layers), 400)}");
            layer = layers[0];
        }
        else if (!layers.Contains(layer))
        {
            throw new DriftWatchException($"run '{name}' has no layer maps of layer '{DisplayText.Clean(layer)}'; its layers: {DisplayText.Clean(string.Join(", ", layers), 400)}");
        }
        var methods = kinds.Where(k => k.Layer == layer).Select(k => k.Method).ToList();
        string? method = parse.GetValue(Method);
        if (method is null)
        {
            method = methods.Contains(DefaultMethod) ? DefaultMethod
                : methods.Count == 1 ? methods[0]
                : throw new DriftWatchException($"layer '{DisplayText.Clean(layer)}' has maps of several methods; choose one with --method: {DisplayText.Clean(string.Join(", ", methods), 400)}");
        }
        else if (!methods.Contains(method))
        {
            throw new DriftWatchException($"layer '{DisplayText.Clean(layer)}' of run '{name}' has no '{DisplayText.Clean(method)}' maps; its methods: {DisplayText.Clean(string.Join(", ", methods), 400)}");
        }
        return (layer, method);
    }

    /// <summary>The layer maps of the run's own target, in epoch order.</summary>
    public static IReadOnlyList<LayerMapDocument> Maps(RunStore store, RunDocument run, string layer, string method)
    {
        var maps = store.LayerMaps(run.Id, layer, method).Where(m => m.Target == run.Target).ToList();
        if (maps.Count == 0)
            throw new DriftWatchException($"run '{DisplayText.Clean(run.Name)}' has no complete epoch with '{DisplayText.Clean(method)}' maps of layer '{DisplayText.Clean(layer)}'");
        return maps;
    }

    /// <summary>The plain-English line describing the thresholds.</summary>
    public static string Describe(NeuronAudit audit) => string.Create(
        CultureInfo.InvariantCulture,
        $"signs {(audit.Oriented ? "toward the class the model predicts for each row" : "as they are (toward a higher output)")}; near zero: at most {audit.Options.NearZero:0.###} × the row's mean |conductance|; inactive: near zero on ≥ {audit.Options.InactiveShare:P0} of rows; consistently negative or positive: ≥ {audit.Options.ConsistentShare:P0} of the other rows of one sign");

    private const string DemoLayer = "_scorer.1";

    /// <summary>A number option within <paramref name="minimum"/>..<paramref name="maximum"/> (above the minimum when <paramref name="above"/>).</summary>
    public static Option<double> Number(string name, string description, double defaultValue, double minimum, double maximum, bool above = false)
    {
        string range = $"{name} must be a number {(above ? "above" : "from")} {minimum.ToString(CultureInfo.InvariantCulture)} {(above ? "and at most" : "to")} {maximum.ToString(CultureInfo.InvariantCulture)}";
        return new Option<double>(name)
        {
            Description = description,
            HelpName = "X",
            DefaultValueFactory = _ => defaultValue,
            CustomParser = result =>
            {
                if (result.Tokens.Count == 0)
                    return defaultValue;
                string text = result.Tokens[^1].Value;
                if (!double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out double value) || !double.IsFinite(value))
                {
                    result.AddError($"{range}; got '{text}'");
                    return defaultValue;
                }
                if (value < minimum || value > maximum || (above && value == minimum))
                    result.AddError($"{range}; got {value.ToString(CultureInfo.InvariantCulture)}");
                return value;
            },
        };
    }
}
