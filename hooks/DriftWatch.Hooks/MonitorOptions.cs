using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Model;
using DriftWatch.Probing;

namespace DriftWatch.Hooks;

/// <summary>How a <see cref="TrainingMonitor"/> watches a run. Build once, then the monitor validates and keeps it.</summary>
public sealed record MonitorOptions
{
    /// <summary>Path of the LiteDB store file; created when missing.</summary>
    public required string StorePath { get; init; }

    /// <summary>The run's name in the store. Reusing a name resumes that run (same schema and probe set required).</summary>
    public required string RunName { get; init; }

    /// <summary>The feature schema of the watched model.</summary>
    public required FeatureSchema Schema { get; init; }

    /// <summary>The probe set attributed at every epoch.</summary>
    public required ProbeSet Probe { get; init; }

    /// <summary>Attribution methods. Default: Integrated Gradients, 64 midpoint steps.</summary>
    public ImmutableArray<IAttributionMethod> Methods { get; init; } = [new IntegratedGradients()];

    /// <summary>The attributed output. Default: the logit of a binary classifier.</summary>
    public AttributionTarget Target { get; init; } = AttributionTarget.Logit;

    /// <summary>The baseline of path and difference methods. Default: zero.</summary>
    public Baseline Baseline { get; init; } = Baseline.Zero;

    /// <summary>At most this many expanded rows go through the model at once. Default <see cref="AttributionInput.DefaultChunkRows"/> (2048).</summary>
    public int ChunkRows { get; init; } = AttributionInput.DefaultChunkRows;

    /// <summary>
    /// Memory one block of expanded rows may take in its forward and backward pass, in bytes: blocks get fewer rows than
    /// <see cref="ChunkRows"/> when the model's rows are large (<see cref="MemoryBudget"/>). Default
    /// <see cref="MemoryBudget.DefaultBytes"/> (256 MiB).
    /// </summary>
    public long MemoryBudgetBytes { get; init; } = MemoryBudget.DefaultBytes;

    /// <summary>Attribute every k-th epoch (metrics and snapshots are still kept every epoch). Default 1.</summary>
    public int AttributeEvery { get; init; } = 1;

    /// <summary>Save a weight snapshot every epoch. Default true.</summary>
    public bool SaveSnapshots { get; init; } = true;

    /// <summary>Rethrow failures inside monitoring instead of recording them. Default false: training is never interrupted.</summary>
    public bool Strict { get; init; }

    /// <summary>The gate's policy: thresholds, warm-up, patience, which findings may Halt. Default: <see cref="GatePolicy.Default"/>.</summary>
    public GatePolicy Policy { get; init; } = GatePolicy.Default;

    /// <summary>Free text stored with the run: model, data, settings.</summary>
    public string Description { get; init; } = "";

    /// <summary>Per categorical feature name, how many training rows have each value; lets the detector recognise identifier-like features.</summary>
    public ImmutableDictionary<string, ImmutableDictionary<long, int>> TrainingValueCounts { get; init; } =
        ImmutableDictionary<string, ImmutableDictionary<long, int>>.Empty;

    /// <summary>
    /// How to rebuild the model from its stored settings (a factory type and its settings), so <c>driftwatch reattribute</c> can
    /// load the snapshots later. Default: none — a model that is an <see cref="IRebuildableModel"/> (the ready families in
    /// <c>DriftWatch.Hooks.Models</c>, e.g. <c>TabularNet</c>) records its own recipe.
    /// </summary>
    public ModelRecipe? Model { get; init; }

    /// <summary>Measure each map's quality figures (infidelity, max-sensitivity) every attributed epoch. Default: null, off (they cost extra attribution).</summary>
    public QualityOptions? Quality { get; init; }

    /// <summary>The clock. Default: the system clock.</summary>
    public TimeProvider Time { get; init; } = TimeProvider.System;

    /// <summary>
    /// The watched model, optional. When given, the monitor checks its schema and weight shapes when it is built, so a run
    /// name already used by a different model is refused at configuration time instead of failing every epoch.
    /// </summary>
    public IWatchedModel? WatchedModel { get; init; }

    /// <summary>
    /// Hidden layers whose units are attributed at every attributed epoch, by module path as <c>named_modules()</c> of the
    /// model's module lists them (e.g. <c>_scorer.1</c>); each gets one layer map per layer method. Default: none.
    /// </summary>
    public ImmutableArray<string> WatchedLayers { get; init; } = [];

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
    /// resumed run redoes it. See the README's performance section for what it buys on two cores.
    /// </remarks>
    public bool BackgroundAttribution { get; init; }

    /// <summary>Checks every setting, naming the first bad one.</summary>
    /// <exception cref="DriftWatchException">A setting is out of range or the probe set does not fit the schema.</exception>
    public void Validate()
    {
        if (string.IsNullOrWhiteSpace(StorePath))
            throw new DriftWatchException("StorePath is empty; give the monitor a store file path such as 'runs.litedb'");
        if (string.IsNullOrWhiteSpace(RunName))
            throw new DriftWatchException("RunName is empty; give the run a name");
        if (Schema is null || Probe is null)
            throw new DriftWatchException("Schema and Probe must both be set");
        if (Methods.IsDefaultOrEmpty)
            throw new DriftWatchException("Methods is empty; configure at least one attribution method");
        var duplicate = Methods.GroupBy(m => m.Name).FirstOrDefault(g => g.Count() > 1);
        if (duplicate is not null)
            throw new DriftWatchException($"method '{duplicate.Key}' is configured twice; each method may appear once");
        if (ChunkRows < 1)
            throw new DriftWatchException($"ChunkRows must be at least 1; got {ChunkRows}");
        if (MemoryBudgetBytes < 1)
            throw new DriftWatchException($"MemoryBudgetBytes must be at least 1; got {MemoryBudgetBytes}");
        if (AttributeEvery < 1)
            throw new DriftWatchException($"AttributeEvery must be at least 1; got {AttributeEvery}");
        if (Policy is null)
            throw new DriftWatchException("Policy is null; leave it out for the built-in policy");
        if (Probe.Rows.DenseCount != Schema.DenseCount || Probe.Rows.CategoricalCount != Schema.CategoricalCount)
            throw new DriftWatchException(
                $"probe rows have {Probe.Rows.DenseCount} dense and {Probe.Rows.CategoricalCount} categorical inputs but the schema has {Schema.DenseCount} and {Schema.CategoricalCount}; build the probe from the model's own input rows");
        if (Baseline.Kind == BaselineKind.Given && Baseline.Values!.Length != Schema.ColumnCount)
            throw new DriftWatchException($"given baseline has {Baseline.Values.Length} values but the schema has {Schema.ColumnCount} feature-space columns");
        Quality?.Validate();
        if (BackgroundAttribution && Model is null)
            throw new DriftWatchException("BackgroundAttribution needs Model (a ModelRecipe): the monitor builds its own copy of the model from it to attribute each epoch's weights while the next epoch trains");
        if (Model is not null)
        {
            // Building draws fresh weights; the caller's random stream must not move because the monitor checked a recipe.
            using var state = TorchSharp.torch.random.get_rng_state();
            var built = Model.Build();
            try
            {
                if (!built.Schema.Names.SequenceEqual(Schema.Names) || built.Schema.ColumnCount != Schema.ColumnCount)
                    throw new DriftWatchException($"the model that Model's factory '{Model.FactoryName}' builds from its settings has another feature schema than Schema; give the factory the settings of the model you train");
            }
            finally
            {
                built.Module.Dispose();
                TorchSharp.torch.random.set_rng_state(state);
            }
        }
        if (WatchedModel is not null && (!WatchedModel.Schema.Names.SequenceEqual(Schema.Names) || WatchedModel.Schema.ColumnCount != Schema.ColumnCount))
            throw new DriftWatchException("WatchedModel's schema differs from Schema; pass model.Schema as Schema");
        if (!WatchedLayers.IsDefault && !WatchedLayers.IsEmpty)
        {
            if (WatchedLayers.Any(string.IsNullOrWhiteSpace))
                throw new DriftWatchException("WatchedLayers has an empty name; name each layer by its module path, e.g. '_scorer.1'");
            var twice = WatchedLayers.GroupBy(l => l, StringComparer.Ordinal).FirstOrDefault(g => g.Count() > 1);
            if (twice is not null)
                throw new DriftWatchException($"layer '{twice.Key}' is in WatchedLayers twice; name each layer once");
            if (LayerMethods.IsDefaultOrEmpty)
                throw new DriftWatchException("WatchedLayers is set but LayerMethods is empty; leave LayerMethods out for layer conductance");
            var notLayer = LayerMethods.FirstOrDefault(m => m is not ILayerMethod);
            if (notLayer is not null)
                throw new DriftWatchException($"LayerMethods holds '{notLayer.Name}', which is not a layer method; use layer-conductance, layer-activation or layer-gradient-x-activation");
            var sameName = LayerMethods.GroupBy(m => m.Name).FirstOrDefault(g => g.Count() > 1);
            if (sameName is not null)
                throw new DriftWatchException($"layer method '{sameName.Key}' is configured twice; each may appear once");
            if (WatchedModel is not null)
            {
                foreach (string layer in WatchedLayers)
                    WatchedLayer.Find(WatchedModel.Module, layer); // an unknown path is refused here, before training
            }
        }
        foreach (var name in TrainingValueCounts.Keys)
        {
            if (!Schema.Features.Any(f => f.Name == name && f.Kind == FeatureKind.Categorical))
                throw new DriftWatchException($"TrainingValueCounts names '{name}', which is not a categorical feature of the schema");
        }
    }
}
