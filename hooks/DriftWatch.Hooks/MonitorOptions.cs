using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Model;
using DriftWatch.Options;
using DriftWatch.Probing;
using DriftWatch.Storage;

namespace DriftWatch.Hooks;

/// <summary>How a <see cref="TrainingMonitor"/> watches a run. Build once, then the monitor validates and keeps it.</summary>
/// <remarks>
/// A setting that can be checked alone (an empty name, a count below 1, a method twice) is checked when it is set, by
/// <c>new</c> or <c>with</c>; what depends on several settings is checked by <see cref="Validate"/>, which names every problem.
/// </remarks>
public sealed record MonitorOptions
{
    private static readonly IntegerRange OneOrMore = IntegerRange.AtLeast(1) with { Text = "at least 1" };

    /// <summary>Path of the LiteDB store file; created when missing.</summary>
    /// <exception cref="DriftWatchException">Empty.</exception>
    public required string StorePath
    {
        get;
        init => field = !string.IsNullOrWhiteSpace(value) ? value
            : throw new DriftWatchException("StorePath is empty; give the monitor a store file path such as 'runs.litedb'");
    }

    /// <summary>
    /// The run's name in the store, compared exactly (ordinal, case-sensitive): <c>Night-7</c> and <c>night-7</c> are two
    /// runs. A name already in the store with complete epochs is continued only with <see cref="Resume"/> set. At most
    /// <see cref="RunStore.MaximumRunNameBytes"/> (512) bytes in UTF-8; a longer name is refused by <see cref="Validate"/>.
    /// </summary>
    /// <exception cref="DriftWatchException">Empty.</exception>
    public required string RunName
    {
        get;
        init => field = !string.IsNullOrWhiteSpace(value) ? value : throw new DriftWatchException("RunName is empty; give the run a name");
    }

    /// <summary>
    /// Continue the run named <see cref="RunName"/> when the store already holds epochs of it: the loop goes on from
    /// <see cref="TrainingMonitor.LastEpoch"/> + 1 (same schema, probe set and methods required). Default false: a run
    /// name with stored epochs is refused when the monitor is built, so a new training never mixes into an earlier one.
    /// </summary>
    public bool Resume { get; init; }

    /// <summary>The feature schema of the watched model: at most <see cref="RunStore.MaximumFeatures"/> (20,000) features.</summary>
    /// <exception cref="DriftWatchException">Null.</exception>
    public required FeatureSchema Schema { get; init => field = value ?? throw new DriftWatchException("Schema is null; pass the watched model's schema (model.Schema)"); }

    /// <summary>The probe set attributed at every epoch.</summary>
    /// <remarks>
    /// The store's limits, checked by <see cref="Validate"/> before a store is opened: an epoch's map of all probe rows
    /// × features at most <see cref="RunStore.MaximumMapBytes"/> (4 bytes a cell, <see cref="RunStore.MapBytes"/>; about
    /// 250,000 rows with 13 features), and the rows themselves at most <see cref="RunStore.MaximumProbeBytes"/>
    /// (12,000,000 bytes: 4 per dense input, 8 per categorical input, 4 per label, per row).
    /// </remarks>
    /// <exception cref="DriftWatchException">Null.</exception>
    public required ProbeSet Probe { get; init => field = value ?? throw new DriftWatchException("Probe is null; build a probe set from the model's own input rows (ProbeSet.Select)"); }

    /// <summary>Attribution methods. Default: Integrated Gradients, 64 midpoint steps.</summary>
    /// <exception cref="DriftWatchException">Empty, or a method twice.</exception>
    public ImmutableArray<IAttributionMethod> Methods { get; init => field = CheckMethods(value); } = [new IntegratedGradients()];

    /// <summary>
    /// The attributed output. Default: each row's own true class (<see cref="AttributionTarget.TrueClass"/>) when the probe's
    /// labels are K ≥ 3 classes and no layers are watched, else the logit of a binary classifier.
    /// </summary>
    public AttributionTarget Target
    {
        get => field ?? (LabelKinds.Of(Probe?.Rows.Labels) == LabelKind.Classes && WatchedLayers.IsDefaultOrEmpty ? AttributionTarget.TrueClass : AttributionTarget.Logit);
        init;
    }

    /// <summary>The baseline of path and difference methods. Default: zero.</summary>
    public Baseline Baseline { get; init; } = Baseline.Zero;

    /// <summary>At most this many expanded rows go through the model at once. Default <see cref="AttributionInput.DefaultChunkRows"/> (2048).</summary>
    /// <exception cref="DriftWatchException">Less than 1.</exception>
    public int ChunkRows { get; init => field = OneOrMore.Check(value, nameof(ChunkRows)); } = AttributionInput.DefaultChunkRows;

    /// <summary>
    /// Memory one block of expanded rows may take in its forward and backward pass, in bytes: blocks get fewer rows than
    /// <see cref="ChunkRows"/> when the model's rows are large (<see cref="MemoryBudget"/>). Default
    /// <see cref="MemoryBudget.DefaultBytes"/> (256 MiB).
    /// </summary>
    /// <exception cref="DriftWatchException">Less than 1.</exception>
    public long MemoryBudgetBytes { get; init => field = OneOrMore.Check(value, nameof(MemoryBudgetBytes)); } = MemoryBudget.DefaultBytes;

    /// <summary>Attribute every k-th epoch (metrics and snapshots are still kept every epoch). Default 1.</summary>
    /// <exception cref="DriftWatchException">Less than 1.</exception>
    public int AttributeEvery { get; init => field = OneOrMore.Check(value, nameof(AttributeEvery)); } = 1;

    /// <summary>Save a weight snapshot every epoch. Default true.</summary>
    public bool SaveSnapshots { get; init; } = true;

    /// <summary>Rethrow failures inside monitoring instead of recording them. Default false: training is never interrupted.</summary>
    public bool Strict { get; init; }

    /// <summary>The gate's policy: thresholds, warm-up, patience, which findings may Halt. Default: <see cref="GatePolicy.Default"/>.</summary>
    /// <exception cref="DriftWatchException">Null.</exception>
    public GatePolicy Policy { get; init => field = value ?? throw new DriftWatchException("Policy is null; leave it out for the built-in policy"); } = GatePolicy.Default;

    /// <summary>Free text stored with the run: model, data, settings.</summary>
    public string Description { get; init; } = "";

    /// <summary>
    /// Per categorical feature name, how many training rows have each value; lets the detector recognise identifier-like
    /// features. Optional: when empty, the counts <see cref="ProbeSet.Select(ProbeRows, ProbeRows, int, int)"/> took over
    /// every training row it was given are used (<see cref="ProbeSet.TrainingValueCounts"/>); give them only to override
    /// those, or for a probe built from its halves alone. Default: empty.
    /// </summary>
    public ImmutableDictionary<string, ImmutableDictionary<long, int>> TrainingValueCounts { get; init; } =
        ImmutableDictionary<string, ImmutableDictionary<long, int>>.Empty;

    /// <summary>
    /// How to rebuild the model from its stored settings (a factory type and its settings), so <c>driftwatch reattribute</c> can
    /// load the snapshots later. Default: none — a model that is an <see cref="IRebuildableModel"/> (the ready families in
    /// <c>DriftWatch.Hooks.Models</c>, e.g. <c>TabularNet</c>) records its own recipe.
    /// </summary>
    public ModelRecipe? Model { get; init; }

    /// <summary>
    /// The run folder whose TorchScript snapshots are this run's models (a run written by <c>hooks/driftwatch_follow.py</c> and
    /// followed by <c>driftwatch follow</c>, which sets it); stored with the run, so <c>reattribute</c> loads each epoch's
    /// snapshot from there. Default: none.
    /// </summary>
    public string? RunFolder { get; init; }

    /// <summary>Measure each map's quality figures (infidelity, max-sensitivity) every attributed epoch. Default: null, off (they cost extra attribution).</summary>
    public QualityOptions? Quality { get; init; }

    /// <summary>The clock. Default: the system clock.</summary>
    public TimeProvider Time { get; init; } = TimeProvider.System;

    /// <summary>
    /// How long the run's writer on another host may go without a heartbeat before this monitor takes the run over, as
    /// after a crash. Default <see cref="RunStore.DefaultStaleWriterAfter"/> (1 hour); set it above your longest epoch.
    /// </summary>
    /// <remarks>
    /// The monitor marks its run with its process id, host name and start time, and refreshes a heartbeat with each stored
    /// epoch. A second monitor of the same run (for instance <see cref="Resume"/> while the first still trains) is refused
    /// when it is built, with one line naming the first; once the first is gone — its process no longer runs on this host,
    /// or on another host its heartbeat is older than this — it is taken over, and <see cref="TrainingMonitor.TookOver"/>
    /// says so. A monitor whose run was taken over stores no more epochs (each is a monitoring failure).
    /// </remarks>
    /// <exception cref="DriftWatchException">Zero or negative.</exception>
    public TimeSpan StaleWriterAfter
    {
        get;
        init => field = value > TimeSpan.Zero ? value : throw new DriftWatchException($"StaleWriterAfter is {value}; give a positive time such as 1 hour");
    } = RunStore.DefaultStaleWriterAfter;

    /// <summary>
    /// The watched model, optional. When given, the monitor checks its schema and weight shapes when it is built, so a run
    /// name already used by a different model is refused at configuration time instead of failing every epoch.
    /// </summary>
    public IWatchedModel? WatchedModel { get; init; }

    /// <summary>
    /// Hidden layers whose units are attributed at every attributed epoch, by module path as <c>named_modules()</c> of the
    /// model's module lists them (e.g. <c>_scorer.1</c>); each gets one layer map per layer method. Default: none.
    /// </summary>
    /// <exception cref="DriftWatchException">A blank name, or a layer twice.</exception>
    public ImmutableArray<string> WatchedLayers { get; init => field = CheckLayers(value); } = [];

    /// <summary>The methods applied to each watched layer; each must be an <see cref="ILayerMethod"/>. Default: layer conductance, 32 steps.</summary>
    public ImmutableArray<IAttributionMethod> LayerMethods { get; init; } = [new LayerConductance(steps: 32)];

    /// <summary>
    /// Attribute, judge and store each epoch on a worker thread while the next epoch trains. Default false. Needs
    /// <see cref="Model"/>: the monitor builds its own copy of the model from the recipe and loads each epoch's weights into
    /// it, so the weights attributed are the epoch's even as training changes the model.
    /// </summary>
    /// <remarks>
    /// <see cref="TrainingMonitor.EndEpoch"/> then snapshots the weights, waits for the previous epoch's work, starts this
    /// epoch's and returns the previous epoch's verdict (one epoch late); <see cref="TrainingMonitor.WaitForPendingEpoch"/>
    /// gives the last one. A kill loses at most the epoch being worked on: the store holds every epoch before it, and a
    /// resumed run redoes it. See docs/performance.md for what it buys on two cores.
    /// </remarks>
    public bool BackgroundAttribution { get; init; }

    /// <summary>
    /// Checks what no single setting can check alone (the probe set and baseline against the schema, the watched model and
    /// layers, the value counts, the quality settings, the store's size limits on the run name, the schema and the probe
    /// set), naming every problem. Changes nothing and builds nothing: the recipe's model is checked by
    /// <see cref="CheckModelRecipe"/> where the monitor builds it.
    /// </summary>
    /// <exception cref="DriftWatchException">One or more problems, all named on one line.</exception>
    public void Validate()
    {
        var problems = new Problems();
        problems.AddIf(Probe.Rows.DenseCount != Schema.DenseCount || Probe.Rows.CategoricalCount != Schema.CategoricalCount, () =>
            $"probe rows have {Probe.Rows.DenseCount} dense and {Probe.Rows.CategoricalCount} categorical inputs but the schema has {Schema.DenseCount} and {Schema.CategoricalCount}; build the probe from the model's own input rows");
        problems.AddIf(Baseline.Kind == BaselineKind.Given && Baseline.Values!.Length != Schema.ColumnCount, () =>
            $"given baseline has {Baseline.Values!.Length} values but the schema has {Schema.ColumnCount} feature-space columns");
        if (Quality is not null)
            problems.Try(Quality.Validate);
        problems.AddIf(BackgroundAttribution && Model is null, () =>
            "BackgroundAttribution needs Model (a ModelRecipe): the monitor builds its own copy of the model from it to attribute each epoch's weights while the next epoch trains");
        problems.AddIf(WatchedModel is not null && !SameSchema(WatchedModel.Schema), () => "WatchedModel's schema differs from Schema; pass model.Schema as Schema");
        if (Target.IsPerRow)
        {
            var labels = LabelKinds.Of(Probe.Rows.Labels);
            problems.AddIf(labels is not (LabelKind.Binary or LabelKind.Classes), () =>
                $"Target is the row's true class but the probe's labels are {(labels == LabelKind.None ? "missing" : "not class indices")}; give each probe row its class (0 … K−1) or choose another target");
            problems.AddIf(!WatchedLayers.IsEmpty, () =>
                "Target is the row's true class, which reads a different output per row, but layer maps attribute one output: watch layers with Target = AttributionTarget.Class(k)");
        }
        if (!WatchedLayers.IsEmpty)
        {
            problems.AddIf(LayerMethods.IsDefaultOrEmpty, () => "WatchedLayers is set but LayerMethods is empty; leave LayerMethods out for layer conductance");
            if (!LayerMethods.IsDefaultOrEmpty)
            {
                foreach (var notLayer in LayerMethods.Where(m => m is not ILayerMethod))
                    problems.Add($"LayerMethods holds '{notLayer.Name}', which is not a layer method; use layer-conductance, layer-activation or layer-gradient-x-activation");
                foreach (var sameName in LayerMethods.GroupBy(m => m.Name).Where(g => g.Count() > 1))
                    problems.Add($"layer method '{sameName.Key}' is configured twice; each may appear once");
            }
            if (WatchedModel is not null)
            {
                foreach (string layer in WatchedLayers)
                    problems.Try(() => WatchedLayer.Find(WatchedModel.Module, layer)); // an unknown path is refused here, before training
            }
        }
        AddSizeProblems(problems);
        foreach (var name in (TrainingValueCounts ?? ImmutableDictionary<string, ImmutableDictionary<long, int>>.Empty).Keys)
        {
            problems.AddIf(!Schema.Features.Any(f => f.Name == name && f.Kind == FeatureKind.Categorical), () =>
                $"TrainingValueCounts names '{name}', which is not a categorical feature of the schema");
        }
        problems.ThrowIfAny();
    }

    /// <summary>
    /// Builds the model from <see cref="Model"/>'s recipe and checks it with <see cref="ValidateModelSchema"/>; does nothing
    /// without a recipe. Building draws fresh weights, so the caller's random stream is saved and restored around it.
    /// </summary>
    /// <exception cref="DriftWatchException">The built model's schema is not <see cref="Schema"/>.</exception>
    public void CheckModelRecipe()
    {
        if (Model is null)
            return;
        using var state = TorchSharp.torch.random.get_rng_state();
        var built = Model.Build();
        try
        {
            ValidateModelSchema(built);
        }
        finally
        {
            built.Module.Dispose();
            TorchSharp.torch.random.set_rng_state(state);
        }
    }

    /// <summary>Checks that a model built from <see cref="Model"/>'s recipe has the feature schema <see cref="Schema"/> names.</summary>
    /// <exception cref="DriftWatchException">Its schema differs.</exception>
    public void ValidateModelSchema(IWatchedModel built)
    {
        ArgumentNullException.ThrowIfNull(built);
        if (!SameSchema(built.Schema))
            throw new DriftWatchException($"the model that Model's factory '{Model?.FactoryName}' builds from its settings has another feature schema than Schema; give the factory the settings of the model you train");
    }

    // The store's limits, measured from the sizes alone, before anything is allocated for the run or a store is opened.
    private void AddSizeProblems(Problems problems)
    {
        var culture = System.Globalization.CultureInfo.InvariantCulture;
        int nameBytes = System.Text.Encoding.UTF8.GetByteCount(RunName);
        problems.AddIf(nameBytes > RunStore.MaximumRunNameBytes, () => string.Create(culture,
            $"RunName is {nameBytes:N0} bytes in UTF-8; a store takes run names of at most {RunStore.MaximumRunNameBytes} bytes; choose a shorter name"));
        int features = Schema.Features.Length;
        problems.AddIf(features > RunStore.MaximumFeatures, () => string.Create(culture,
            $"the schema has {features:N0} features; a run takes at most {RunStore.MaximumFeatures:N0} (each epoch keeps its per-feature figures in one store document, and a document is at most 16 MiB); watch a subset or group features"));
        long rows = Probe.Count;
        long mapBytes = RunStore.MapBytes(rows, features);
        problems.AddIf(mapBytes > RunStore.MaximumMapBytes, () => string.Create(culture,
            $"the probe set has {rows:N0} rows × {features:N0} features: an epoch's map would take {mapBytes:N0} bytes, and a map is one store document of at most {RunStore.MaximumMapBytes:N0} bytes; use at most {MostRows(features):N0} probe rows with this schema"));
        long rowBytes = (4L * Probe.Rows.DenseCount) + (8L * Probe.Rows.CategoricalCount) + (Probe.Rows.Labels is null ? 0 : 4);
        long probeBytes = rows * rowBytes;
        problems.AddIf(probeBytes > RunStore.MaximumProbeBytes, () => string.Create(culture,
            $"the probe set's {rows:N0} rows take {probeBytes:N0} bytes; the run's record holds at most {RunStore.MaximumProbeBytes:N0} bytes of probe rows; use at most {RunStore.MaximumProbeBytes / Math.Max(1, rowBytes):N0} probe rows"));
    }

    // The most probe rows whose map fits with this many features.
    private static long MostRows(int features)
    {
        long rows = (RunStore.MaximumMapBytes - RunStore.MapBytes(0, features)) / ((4L * features) + 8);
        return Math.Max(0, rows);
    }

    private bool SameSchema(FeatureSchema other) => other.Names.SequenceEqual(Schema.Names) && other.ColumnCount == Schema.ColumnCount;

    private static ImmutableArray<IAttributionMethod> CheckMethods(ImmutableArray<IAttributionMethod> methods)
    {
        if (methods.IsDefaultOrEmpty)
            throw new DriftWatchException("Methods is empty; configure at least one attribution method");
        var problems = new Problems();
        foreach (var duplicate in methods.GroupBy(m => m.Name).Where(g => g.Count() > 1))
            problems.Add($"method '{duplicate.Key}' is configured twice; each method may appear once");
        problems.ThrowIfAny();
        return methods;
    }

    private static ImmutableArray<string> CheckLayers(ImmutableArray<string> layers)
    {
        if (layers.IsDefault)
            return [];
        var problems = new Problems();
        problems.AddIf(layers.Any(string.IsNullOrWhiteSpace), () => "WatchedLayers has an empty name; name each layer by its module path, e.g. '_scorer.1'");
        foreach (var twice in layers.Where(l => !string.IsNullOrWhiteSpace(l)).GroupBy(l => l, StringComparer.Ordinal).Where(g => g.Count() > 1))
            problems.Add($"layer '{twice.Key}' is in WatchedLayers twice; name each layer once");
        problems.ThrowIfAny();
        return layers;
    }
}
