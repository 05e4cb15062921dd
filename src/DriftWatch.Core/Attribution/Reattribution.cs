using System.Collections.Immutable;
using System.Diagnostics;
using System.Runtime.ExceptionServices;
using DriftWatch.Detection;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Sharding;
using DriftWatch.Storage;

namespace DriftWatch.Attribution;

/// <summary>What happened to one epoch in a re-attribution.</summary>
public enum ReattributionOutcome
{
    /// <summary>The map was computed and stored.</summary>
    Stored,

    /// <summary>A map under the stored name was already there; it was left as it was.</summary>
    AlreadyStored,

    /// <summary>The epoch has no weight snapshot, so nothing could be computed.</summary>
    NoSnapshot,
}

/// <summary>One epoch's result in a re-attribution.</summary>
/// <param name="Epoch">The epoch.</param>
/// <param name="Outcome">What happened.</param>
/// <param name="Seconds">Seconds spent on it.</param>
/// <param name="Index">Its position among the epochs of the request, from 1.</param>
/// <param name="Count">How many epochs the request covers.</param>
public sealed record ReattributedEpoch(int Epoch, ReattributionOutcome Outcome, double Seconds, int Index, int Count)
{
    /// <summary>What went wrong without stopping the epoch (a declared entry layer that failed its check), one line each.</summary>
    public ImmutableArray<string> Problems { get; init; } = [];
}

/// <summary>What to re-attribute: a method, the epochs, the name the maps are stored under.</summary>
public sealed record ReattributionOptions
{
    /// <summary>The method to attribute with.</summary>
    public required IAttributionMethod Method { get; init; }

    /// <summary>The method name the new maps are stored under; must differ from the run's configured methods. Default: <c>re-</c> and the method's name.</summary>
    public string? StoredName { get; init; }

    /// <summary>The first epoch to re-attribute. Default: the run's first.</summary>
    public int FirstEpoch { get; init; } = int.MinValue;

    /// <summary>The last epoch to re-attribute. Default: the run's last.</summary>
    public int LastEpoch { get; init; } = int.MaxValue;

    /// <summary>At most this many expanded rows go through the model at once. Default <see cref="AttributionInput.DefaultChunkRows"/> (2048).</summary>
    public int ChunkRows { get; init; } = AttributionInput.DefaultChunkRows;

    /// <summary>Memory one block may take, in bytes; fewer rows than <see cref="ChunkRows"/> when the model's rows are large. Default <see cref="MemoryBudget.DefaultBytes"/> (256 MiB).</summary>
    public long MemoryBudgetBytes { get; init; } = MemoryBudget.DefaultBytes;

    /// <summary>Measure the new maps' quality figures too. Default: null, off.</summary>
    public QualityOptions? Quality { get; init; }

    /// <summary>The name the maps are stored under.</summary>
    public string Name => StoredName ?? Reattribution.DefaultStoredName(Method.Name);
}

/// <summary>
/// Recomputes a stored run's attribution maps from its weight snapshots and probe set with another method (or other
/// settings), and stores them beside the originals under their own name; existing maps are never changed.
/// </summary>
public static class Reattribution
{
    /// <summary>The name re-attributed maps are stored under when none is given: <c>re-</c> and the method's name.</summary>
    public static string DefaultStoredName(string method) => "re-" + method;

    /// <summary>The probe set a run recorded, checked against its stored hash.</summary>
    /// <exception cref="StoreException">The stored rows do not hash to the run's probe hash.</exception>
    internal static ProbeSet ProbeOf(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        var labels = run.ProbeLabels is null ? null : FloatBytes.ToFloats(run.ProbeLabels);
        var rows = new ProbeRows(FloatBytes.ToFloats(run.ProbeDense), run.DenseCount, FloatBytes.ToLongs(run.ProbeCategorical), run.CategoricalCount, labels);
        var probe = new ProbeSet(
            rows.Take(Enumerable.Range(0, run.HeldOutRows).ToArray()),
            rows.Take(Enumerable.Range(run.HeldOutRows, run.TrainingRows).ToArray()));
        if (probe.Hash != run.ProbeHash)
            throw new StoreException($"the probe rows stored with run '{run.Name}' no longer match their hash; the store is damaged");
        return probe;
    }

    /// <summary>The baseline a run recorded.</summary>
    /// <exception cref="DriftWatchException">A caller-given baseline whose values were not stored.</exception>
    internal static Baseline BaselineOf(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        return run.Baseline switch
        {
            "zero" => Baseline.Zero,
            "training-mean" => Baseline.TrainingMean,
            "given" when run.BaselineValues is not null => Baseline.FromValues(FloatBytes.ToFloats(run.BaselineValues)),
            "given" => throw new DriftWatchException($"run '{run.Name}' used a caller-given baseline whose values were not stored (a store from an older version); it cannot be re-attributed"),
            _ => throw new StoreException($"run '{run.Name}' records an unknown baseline '{run.Baseline}'; expected zero, training-mean or given"),
        };
    }

    /// <summary>Re-attributes the requested epochs of <paramref name="run"/> with <paramref name="model"/>, loading each epoch's snapshot into it.</summary>
    /// <param name="store">The store, opened for writing.</param>
    /// <param name="run">The run.</param>
    /// <param name="model">A model of the run's architecture (weights are replaced by each snapshot).</param>
    /// <param name="request">The method, epochs and stored name.</param>
    /// <param name="progress">Told after each epoch, or null.</param>
    /// <returns>One entry per epoch in the range.</returns>
    /// <exception cref="DriftWatchException">A bad request, a model or snapshot that does not fit, or no epoch in the range.</exception>
    internal static IReadOnlyList<ReattributedEpoch> Run(RunStore store, RunDocument run, IWatchedModel model, ReattributionOptions request, IProgress<ReattributedEpoch>? progress = null) =>
        Run(store, run, new StoredWeights(model), request, progress);

    /// <summary>Re-attributes the requested epochs of <paramref name="run"/> with the models <paramref name="models"/> gives each epoch.</summary>
    /// <exception cref="DriftWatchException">A bad request, a model or snapshot that does not fit, or no epoch in the range.</exception>
    internal static IReadOnlyList<ReattributedEpoch> Run(RunStore store, RunDocument run, EpochModels models, ReattributionOptions request, IProgress<ReattributedEpoch>? progress = null)
    {
        ArgumentNullException.ThrowIfNull(models);
        var epochs = Check(store, run, models, request);
        string label = AttributionTarget.Parse(run.Target).Label;
        // The run's one live writer for as long as the maps are written: refused while a monitor still writes the run.
        store.ClaimWriter(run, "reattribute", DateTime.UtcNow, RunStore.DefaultStaleWriterAfter);
        try
        {
            return Execute(
                store, run, models, request, epochs, progress,
                epoch => store.FindMap(run.Id, epoch, request.Name, label) is not null,
                (map, quality) => store.InOneTransaction(() =>
                {
                    store.RefreshWriter(run, DateTime.UtcNow);
                    store.WriteMap(map);
                    store.WriteQuality(quality);
                }));
        }
        finally
        {
            store.ReleaseWriter(run.Id);
        }
    }

    /// <summary>
    /// Re-attributes one shard of the requested epochs, reading the run and its snapshots from <paramref name="source"/>
    /// (never written) and writing the maps to <paramref name="shardStore"/>, a store of the shard's own that
    /// <see cref="ShardMerge"/> later joins into the run's store.
    /// </summary>
    /// <param name="source">The run's store; only read.</param>
    /// <param name="run">The run, as <paramref name="source"/> holds it.</param>
    /// <param name="model">A model of the run's architecture.</param>
    /// <param name="request">The method, epochs and stored name: the whole job, of which the shard takes its slice.</param>
    /// <param name="shard">Which slice.</param>
    /// <param name="shardStore">The shard's own store, opened for writing: new, or one this same shard wrote before (it resumes).</param>
    /// <param name="progress">Told after each epoch, or null.</param>
    /// <returns>One entry per epoch of the shard (none when the shard's slice is empty).</returns>
    /// <exception cref="DriftWatchException">A bad request, or a shard store holding another shard or job.</exception>
    internal static IReadOnlyList<ReattributedEpoch> RunShard(
        RunStore source, RunDocument run, IWatchedModel model, ReattributionOptions request, Shard shard, RunStore shardStore, IProgress<ReattributedEpoch>? progress = null) =>
        RunShard(source, run, new StoredWeights(model), request, shard, shardStore, progress);

    /// <summary>One shard of the requested epochs, with the models <paramref name="model"/> gives each epoch (see the overload above).</summary>
    /// <exception cref="DriftWatchException">A bad request, or a shard store holding another shard or job.</exception>
    internal static IReadOnlyList<ReattributedEpoch> RunShard(
        RunStore source, RunDocument run, EpochModels model, ReattributionOptions request, Shard shard, RunStore shardStore, IProgress<ReattributedEpoch>? progress = null)
    {
        ArgumentNullException.ThrowIfNull(shardStore);
        var all = Check(source, run, model, request);
        var slice = shard.Slice(all);
        var record = ShardDocuments.For(run, request, shard, all, slice, source.Path);
        CheckShardStore(shardStore, record);
        var copy = ShardDocuments.Prepare(shardStore, record, run, slice);
        string name = request.Name;
        string label = AttributionTarget.Parse(run.Target).Label;
        var results = Execute(
            source, run, model, request, slice, progress,
            epoch => source.FindMap(run.Id, epoch, name, label) is not null || shardStore.FindMap(copy.Id, epoch, name, label) is not null,
            (map, quality) => shardStore.InOneTransaction(() =>
            {
                shardStore.WriteMap(map with { RunId = copy.Id });
                shardStore.WriteQuality(quality with { RunId = copy.Id });
            }));
        var inSource = results.Where(r => r.Outcome == ReattributionOutcome.AlreadyStored && shardStore.FindMap(copy.Id, r.Epoch, name, label) is null).Select(r => r.Epoch);
        shardStore.WriteShard(record with
        {
            AlreadyInSource = [.. inSource],
            NoSnapshot = [.. results.Where(r => r.Outcome == ReattributionOutcome.NoSnapshot).Select(r => r.Epoch)],
            Finished = true,
        });
        return results;
    }

    /// <summary>Checks, without writing, that <paramref name="shardStore"/> is new or holds this same shard of this same job.</summary>
    /// <exception cref="DriftWatchException">It holds another shard, another job, or runs that are not a shard's.</exception>
    internal static void CheckShardStore(RunStore shardStore, ShardDocument record)
    {
        ArgumentNullException.ThrowIfNull(shardStore);
        ArgumentNullException.ThrowIfNull(record);
        var existing = shardStore.FindShard();
        if (existing is null)
        {
            if (shardStore.Runs().Count > 0)
                throw new DriftWatchException($"'{shardStore.Path}' is a store with runs of its own, not a shard store; give the shard a file of its own");
            return;
        }
        string? difference = ShardDocuments.Difference(existing, record);
        if (difference is null && (existing.Index != record.Index || existing.Count != record.Count))
            difference = $"it is shard {existing.Index}/{existing.Count}, not {record.Index}/{record.Count}";
        if (difference is not null)
            throw new DriftWatchException($"shard store '{shardStore.Path}' already holds another shard: {difference}; give this shard another file or folder");
    }

    private static IReadOnlyList<ReattributedEpoch> Execute(
        RunStore source, RunDocument run, EpochModels models, ReattributionOptions request, IReadOnlyList<EpochDocument> epochs,
        IProgress<ReattributedEpoch>? progress, Func<int, bool> alreadyStored, Action<MapDocument, MapQualityDocument> write)
    {
        var attribution = new EpochAttribution
        {
            Probe = ProbeOf(run),
            Schema = RunContext.FromRun(run).Schema,
            Methods = [request.Method],
            Target = AttributionTarget.Parse(run.Target),
            Baseline = BaselineOf(run),
            ChunkRows = request.ChunkRows,
            MemoryBudgetBytes = request.MemoryBudgetBytes,
            Quality = request.Quality,
        };
        var results = new List<ReattributedEpoch>();
        for (int i = 0; i < epochs.Count; i++)
        {
            var epoch = epochs[i];
            var clock = Stopwatch.StartNew();
            ReattributionOutcome outcome;
            ImmutableArray<string> problems = [];
            if (alreadyStored(epoch.Epoch))
            {
                outcome = ReattributionOutcome.AlreadyStored;
            }
            else if (models.Load(source, run, epoch) is not { } model)
            {
                outcome = ReattributionOutcome.NoSnapshot;
            }
            else
            {
                try
                {
                    var (map, quality, entryProblems) = AttributeEpoch(source, run, model, attribution, request, epoch.Epoch);
                    write(map, quality);
                    problems = entryProblems;
                }
                finally
                {
                    models.Release();
                }
                outcome = ReattributionOutcome.Stored;
            }
            var result = new ReattributedEpoch(epoch.Epoch, outcome, clock.Elapsed.TotalSeconds, i + 1, epochs.Count) { Problems = problems };
            results.Add(result);
            progress?.Report(result);
        }
        return results;
    }

    /// <summary>Checks a request against the store without writing anything, and returns the epochs it covers.</summary>
    /// <exception cref="DriftWatchException">A bad name or range, a model whose schema differs from the run's, or a damaged run record.</exception>
    internal static IReadOnlyList<EpochDocument> Check(RunStore store, RunDocument run, IWatchedModel model, ReattributionOptions request) =>
        Check(store, run, new StoredWeights(model), request);

    /// <summary>Checks a request against the store without writing anything, and returns the epochs it covers.</summary>
    /// <exception cref="DriftWatchException">A bad name or range, models whose schema differs from the run's, or a damaged run record.</exception>
    internal static IReadOnlyList<EpochDocument> Check(RunStore store, RunDocument run, EpochModels model, ReattributionOptions request)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(request);
        CheckName(store, run, request, request.Name);
        if (request.ChunkRows < 1)
            throw new DriftWatchException($"chunk rows must be at least 1; got {request.ChunkRows}");
        if (request.MemoryBudgetBytes < 1)
            throw new DriftWatchException($"the memory budget must be at least 1 byte; got {request.MemoryBudgetBytes}");
        if (request.FirstEpoch > request.LastEpoch)
            throw new DriftWatchException($"the epoch range {Range(request)} is empty; give the first epoch before the last");
        request.Quality?.Validate();
        var schema = RunContext.FromRun(run).Schema;
        if (!model.Schema.Names.SequenceEqual(schema.Names) || model.Schema.ColumnCount != schema.ColumnCount)
            throw new DriftWatchException($"the rebuilt model's feature schema ({model.Schema.Count} features, {model.Schema.ColumnCount} columns) differs from run '{run.Name}' ({schema.Count} features, {schema.ColumnCount} columns); the model settings do not describe the trained model");
        ProbeOf(run);
        BaselineOf(run);
        AttributionTarget.Parse(run.Target);
        var all = store.Epochs(run.Id);
        var epochs = all.Where(e => e.Epoch >= request.FirstEpoch && e.Epoch <= request.LastEpoch).ToList();
        if (epochs.Count == 0)
        {
            string stored = all.Count == 0 ? "it has no complete epochs yet" : $"its epochs run from {all[0].Epoch} to {all[^1].Epoch}";
            throw new DriftWatchException($"run '{run.Name}' has no complete epoch in {Range(request)}; {stored}");
        }
        model.CheckFit(store, run, epochs);
        return epochs;
    }

    private static void CheckName(RunStore store, RunDocument run, ReattributionOptions request, string name) =>
        CheckStoredName(store, run, name, request.Method.Name, request.Method.Settings);

    /// <summary>
    /// Checks that maps made by <paramref name="method"/> with <paramref name="settings"/> may be stored under
    /// <paramref name="name"/> in <paramref name="store"/>: a valid name, not one of the run's own methods, and any maps
    /// already under that name made by the same method and settings.
    /// </summary>
    /// <exception cref="DriftWatchException">The name is refused, with the reason.</exception>
    internal static void CheckStoredName(RunStore store, RunDocument run, string name, string method, IReadOnlyDictionary<string, string> settings)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(name);
        ArgumentNullException.ThrowIfNull(method);
        ArgumentNullException.ThrowIfNull(settings);
        if (string.IsNullOrWhiteSpace(name) || name.Contains('/', StringComparison.Ordinal) || name.Trim() != name)
            throw new DriftWatchException($"the stored name of re-attributed maps must be a non-empty name without '/' or surrounding spaces; got '{name}'");
        if (run.Methods.Any(m => m.Name == name))
            throw new DriftWatchException($"'{name}' is one of run '{run.Name}''s own methods; re-attributed maps are stored beside the originals under another name (the default is '{DefaultStoredName(method)}')");
        var earlier = store.Maps(run.Id, name).FirstOrDefault();
        if (earlier is null)
            return;
        bool same = earlier.SourceMethod == method
            && earlier.Settings.Count == settings.Count
            && settings.All(s => earlier.Settings.TryGetValue(s.Key, out var v) && v == s.Value);
        if (!same)
        {
            string described = (earlier.SourceMethod.Length > 0 ? earlier.SourceMethod : earlier.Method)
                + "(" + string.Join(", ", earlier.Settings.OrderBy(s => s.Key, StringComparer.Ordinal).Select(s => s.Key + "=" + s.Value)) + ")";
            throw new DriftWatchException($"run '{run.Name}' already has maps named '{name}' made by {described}; store these under another name so both stay");
        }
    }

    // The epoch's map under the stored name, and its quality document with its agreement with every map already stored
    // at this epoch (originals and other re-attributions alike). A bad entry declaration is reported and the whole model
    // attributed, as the monitor does; any other failure ends the job, since it leaves no map to store.
    private static (MapDocument Map, MapQualityDocument Quality, ImmutableArray<string> Problems) AttributeEpoch(
        RunStore store, RunDocument run, IWatchedModel model, EpochAttribution attribution, ReattributionOptions request, int epoch)
    {
        var attributed = attribution.Attribute(model, run.Id, epoch);
        if (attributed.Problems.FirstOrDefault(p => p.Step != AttributionStep.EntryCheck) is { } fatal)
            ExceptionDispatchInfo.Throw(fatal.Error);
        var fresh = attributed.Maps[0];
        string name = request.Name;
        var map = fresh.Document with { Method = name, SourceMethod = request.Method.Name };
        var agreement = store.MapsAt(run.Id, epoch)
            .Where(m => m.Target == map.Target && m.Method != name && m.Rows == map.Rows && m.Features == map.Features)
            .Select(m => new AgreementDocument { Method = m.Method, Spearman = MethodAgreement.Spearman(fresh.Map, RunReview.ToMap(m), attribution.Probe.HeldOutCount) })
            .ToList();
        return (map, attribution.QualityDocument(map, fresh.Figures, agreement), [.. attributed.Problems.Select(p => p.Text)]);
    }

    private static string Range(ReattributionOptions request) =>
        (request.FirstEpoch == int.MinValue ? "" : request.FirstEpoch.ToString(System.Globalization.CultureInfo.InvariantCulture))
        + ".."
        + (request.LastEpoch == int.MaxValue ? "" : request.LastEpoch.ToString(System.Globalization.CultureInfo.InvariantCulture));
}

/// <summary>Where a re-attribution gets each epoch's model: weights loaded into one rebuilt model, or a model file per epoch.</summary>
internal abstract class EpochModels
{
    /// <summary>The models' feature schema.</summary>
    public abstract FeatureSchema Schema { get; }

    /// <summary>Checks, before anything is written, that the first epoch with a snapshot gives a model that fits the run.</summary>
    /// <exception cref="DriftWatchException">It does not fit.</exception>
    public abstract void CheckFit(RunStore store, RunDocument run, IReadOnlyList<EpochDocument> epochs);

    /// <summary>The model of <paramref name="epoch"/>, or null when the epoch has no snapshot; <see cref="Release"/> follows its use.</summary>
    public abstract IWatchedModel? Load(RunStore store, RunDocument run, EpochDocument epoch);

    /// <summary>Lets go of the model <see cref="Load"/> gave. Default: nothing to do.</summary>
    public virtual void Release()
    {
    }
}

/// <summary>The weight snapshots in the store, loaded in turn into one model of the run's architecture.</summary>
/// <param name="model">A model of the run's architecture; its weights are replaced by each snapshot.</param>
internal sealed class StoredWeights(IWatchedModel model) : EpochModels
{
    private readonly IWatchedModel _model = model ?? throw new ArgumentNullException(nameof(model));

    /// <inheritdoc />
    public override FeatureSchema Schema => _model.Schema;

    /// <inheritdoc />
    public override void CheckFit(RunStore store, RunDocument run, IReadOnlyList<EpochDocument> epochs)
    {
        var first = epochs.FirstOrDefault(e => e.SnapshotId is not null);
        if (first is null)
            return;
        using var weights = store.ReadSnapshot(first.SnapshotId!);
        Snapshots.CheckFit(_model.Module, weights, $"the snapshot of epoch {first.Epoch} of run '{run.Name}'");
    }

    /// <inheritdoc />
    public override IWatchedModel? Load(RunStore store, RunDocument run, EpochDocument epoch)
    {
        if (epoch.SnapshotId is null)
            return null;
        using (var weights = store.ReadSnapshot(epoch.SnapshotId))
            Snapshots.LoadInto(_model.Module, weights, $"the snapshot of epoch {epoch.Epoch} of run '{run.Name}'");
        return _model;
    }
}

/// <summary>Converts per-half importance to its stored form.</summary>
public static class ImportanceDocuments
{
    /// <summary>The stored form of <paramref name="half"/>.</summary>
    internal static ImportanceDocument From(HalfImportance half)
    {
        ArgumentNullException.ThrowIfNull(half);
        return new ImportanceDocument
        {
            MeanAbsolute = [.. half.MeanAbsolute],
            MeanSigned = [.. half.MeanSigned],
            Share = [.. half.Share],
            Alignment = half.Alignment is { } alignment ? [.. alignment] : null,
        };
    }
}
