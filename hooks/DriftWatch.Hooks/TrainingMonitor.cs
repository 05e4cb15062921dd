using System.Collections.Immutable;
using System.Diagnostics;
using System.Globalization;
using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Layers;
using DriftWatch.Model;
using DriftWatch.Storage;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Hooks;

/// <summary>
/// Watches a training run: at each <see cref="EndEpoch"/> it snapshots the weights, attributes the probe set,
/// stores the maps and metrics, and returns the gate's verdict.
/// </summary>
/// <remarks>
/// Never throws into the training loop from <see cref="EndEpoch"/> unless <see cref="MonitorOptions.Strict"/> is on:
/// a failure is recorded with the epoch and reported in the verdict. Configuration errors throw from the constructor.
/// Not thread-safe: call it from the training loop's thread. With <see cref="MonitorOptions.BackgroundAttribution"/> on,
/// the monitor itself attributes, judges and stores each epoch on a worker thread while the next epoch trains (one epoch
/// at a time, in order); <see cref="Dispose"/> waits for that work.
/// </remarks>
public sealed class TrainingMonitor : IDisposable
{
    /// <summary>The largest epoch number <see cref="EndEpoch"/> takes: 1,000,000. A larger one is refused as a monitoring failure (thrown with <see cref="MonitorOptions.Strict"/>) and not stored.</summary>
    public const int MaximumEpoch = 1_000_000;

    private readonly MonitorOptions _options;
    private readonly RunStore _store;
    private readonly RunDocument _run;
    private readonly EpochAttribution _attribution;
    private CrossMethodDetector _detector;
    private volatile int _lastEpoch;
    private IWatchedModel? _checkedModel;

    // Background attribution: the monitor's own copy of the model, the epoch being worked on, the latest verdict.
    private readonly IWatchedModel? _copy;
    private Task<Verdict>? _pending;
    private Verdict _latest = NothingJudged;
    private bool _disposed;

    private static readonly Verdict NothingJudged = new(-1, VerdictKind.Continue, ["no epoch has been judged yet"], []);
    private static readonly EpochMaps NoMaps = new([], [], []);

    /// <summary>Validates the options, opens the store and registers the run (or resumes it).</summary>
    /// <exception cref="DriftWatchException">Bad options, an unusable store, or a resumed run whose schema, probe set or methods differ.</exception>
    public TrainingMonitor(MonitorOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        options.CheckModelRecipe();
        _options = options;
        _attribution = AttributionOf(options);
        // Measured before the store is opened: a record the store cannot hold leaves no file behind.
        var wanted = Describe(options);
        if (RunStore.TooLarge(wanted) is { } tooLarge)
            throw new DriftWatchException(tooLarge);
        _store = RunStore.OpenForWriting(options.StorePath);
        try
        {
            var existing = _store.FindRun(options.RunName);
            if (existing is not null && !options.Resume)
                RefuseUnlessNoEpochs(existing);
            _run = existing is null ? _store.AddRun(wanted) : Resume(existing, wanted);
            if (options.WatchedModel is not null)
                CheckModel(options.WatchedModel); // a run name reused by a different model fails here, before any epoch
            // The run's one live writer is marked once the configuration is accepted (a refused configuration writes
            // nothing) and before any epoch: a second writer is refused here, in one transaction that changes nothing.
            TookOver = _store.ClaimWriter(_run, "monitor", options.Time.GetUtcNow().UtcDateTime, options.StaleWriterAfter);
            _lastEpoch = _store.Epochs(_run.Id).Select(e => e.Epoch).DefaultIfEmpty(-1).Max();
            _detector = CatchUp(before: int.MaxValue);
            if (options.BackgroundAttribution)
                _copy = BuildCopy(options.Model!);
        }
        catch
        {
            _store.Dispose(); // lets go of the run's writer mark, if it was taken
            throw;
        }
    }

    /// <summary>
    /// A line saying the run's earlier writer was gone (its process ended on this host, or its heartbeat went stale on
    /// another) and this monitor took the run over, as after a crash; null when no other writer was marked.
    /// </summary>
    public string? TookOver { get; }

    /// <summary>What the monitor knows of its run now: its id and name in the store, its model's recipe and shape, its last complete epoch.</summary>
    /// <remarks>A copy taken when read; the monitor keeps the run's record to itself.</remarks>
    public MonitoredRun Run => MonitoredRun.Of(_run, _store.Path, _lastEpoch);

    /// <summary>The last complete epoch in the store (−1 before the first), so a resumed loop knows where to start.</summary>
    /// <remarks>With background attribution, an epoch is complete once its background work is stored.</remarks>
    public int LastEpoch => _lastEpoch;

    /// <summary>The store this monitor writes; for the monitor's own assembly and its tests. Others open the file with <see cref="RunStore.OpenForReading"/>.</summary>
    /// <remarks>With background attribution, call <see cref="WaitForPendingEpoch"/> first to read what the latest epoch wrote.</remarks>
    internal RunStore Store => _store;

    /// <summary>Records the epoch: snapshot, attribution maps, metrics, verdict. Call once per epoch, after validation.</summary>
    /// <param name="model">The model being trained, in whatever mode the loop left it (restored afterwards).</param>
    /// <param name="epoch">
    /// The epoch number, increasing and at most <see cref="MaximumEpoch"/>. A stored epoch is never replaced, except the
    /// last one when it was stored incomplete (its attribution or snapshot failed): repeating that epoch redoes it.
    /// </param>
    /// <param name="metrics">The epoch's losses and other metrics.</param>
    /// <returns>
    /// The gate's verdict; stop training on <see cref="VerdictKind.Halt"/> if you wish. With
    /// <see cref="MonitorOptions.BackgroundAttribution"/> on, this is the verdict of the previous epoch (its
    /// <see cref="Verdict.Epoch"/> says which; −1 before any epoch was judged), and this epoch's verdict comes with the next
    /// call or from <see cref="WaitForPendingEpoch"/>.
    /// </returns>
    public Verdict EndEpoch(IWatchedModel model, int epoch, EpochMetrics metrics)
    {
        if (_copy is not null)
            return EndEpochInBackground(model, epoch, metrics);
        var clock = Stopwatch.StartNew();
        var failures = new List<Finding>();
        try
        {
            CheckEpochNumber(epoch);
            Admit(model, epoch, metrics);
            var attributed = IsAttributed(epoch) ? Attribute(model, epoch, failures) : NoMaps;
            using var weights = _options.SaveSnapshots ? Snapshot(model, epoch, failures) : null;
            return _latest = DetectAndRecord(epoch, metrics, attributed, weights, failures, () => clock.Elapsed.TotalSeconds);
        }
        catch (Exception e) when (!_options.Strict)
        {
            return _latest = FailureVerdict(epoch, failures, e);
        }
    }

    /// <summary>
    /// Waits until the epoch being attributed in the background (if any) is judged and stored, and returns the latest
    /// verdict. Call it after the last epoch to get that epoch's verdict. Without background attribution it returns the
    /// verdict of the last <see cref="EndEpoch"/> at once.
    /// </summary>
    /// <returns>The latest verdict; its <see cref="Verdict.Epoch"/> is −1 when no epoch has been judged yet.</returns>
    /// <remarks>With <see cref="MonitorOptions.Strict"/> on, a failure of the background work is rethrown here (once).</remarks>
    public Verdict WaitForPendingEpoch()
    {
        var pending = _pending;
        if (pending is null)
            return _latest;
        _pending = null;
        _latest = pending.GetAwaiter().GetResult();
        return _latest;
    }

    // Background mode: the previous epoch's work ends before this epoch's begins, so store writes, detector state and
    // verdicts stay in epoch order and at most one epoch is ever pending. The weights are snapshotted before EndEpoch
    // returns, so the loop may change the model at once; the worker loads them into its own copy of the model.
    private Verdict EndEpochInBackground(IWatchedModel model, int epoch, EpochMetrics metrics)
    {
        var clock = Stopwatch.StartNew();
        var judged = WaitForPendingEpoch();
        var failures = new List<Finding>();
        MemoryStream? weights = null;
        try
        {
            CheckEpochNumber(epoch);
            Admit(model, epoch, metrics);
            weights = Snapshot(model, epoch, failures);
        }
        catch (Exception e) when (!_options.Strict)
        {
            weights?.Dispose();
            return _latest = FailureVerdict(epoch, failures, e);
        }
        double admitted = clock.Elapsed.TotalSeconds;
        _pending = Task.Run(() => AttributeInBackground(epoch, metrics, weights, failures, admitted));
        return judged;
    }

    // The background half of an epoch: load the snapshot into the monitor's copy of the model, attribute, judge, store.
    private Verdict AttributeInBackground(int epoch, EpochMetrics metrics, MemoryStream? weights, List<Finding> failures, double admitted)
    {
        var clock = Stopwatch.StartNew();
        try
        {
            using (weights)
            {
                var attributed = NoMaps;
                if (IsAttributed(epoch))
                {
                    if (weights is null)
                        failures.Add(Failure(epoch, "attribution", new DriftWatchException("the epoch's weights could not be snapshotted, so its copy of the model could not be loaded")));
                    else if (LoadCopy(weights, epoch, failures))
                        attributed = Attribute(_copy!, epoch, failures);
                }
                if (weights is not null)
                    weights.Position = 0;
                return DetectAndRecord(epoch, metrics, attributed, _options.SaveSnapshots ? weights : null, failures, () => admitted + clock.Elapsed.TotalSeconds);
            }
        }
        catch (Exception e) when (!_options.Strict)
        {
            return FailureVerdict(epoch, failures, e);
        }
    }

    private bool LoadCopy(MemoryStream weights, int epoch, List<Finding> failures)
    {
        try
        {
            using (var reader = new BinaryReader(weights, System.Text.Encoding.UTF8, leaveOpen: true))
                _copy!.Module.load(reader, strict: true);
            return true;
        }
        catch (Exception e) when (!_options.Strict)
        {
            failures.Add(Failure(epoch, "loading the epoch's weights into the background copy of the model", e));
            return false;
        }
    }

    // An epoch number past the limit is a loop passing its step count: stored, it would stretch every chart's epoch axis
    // and stand before every later real epoch of the run, so it is refused before it is stored.
    private static void CheckEpochNumber(int epoch)
    {
        if (epoch > MaximumEpoch)
            throw new DriftWatchException(string.Create(CultureInfo.InvariantCulture, $"epoch {epoch} is above the largest epoch number the monitor takes, {MaximumEpoch}; pass the epoch count, not the step count"));
    }

    // Checks the call before any work: arguments, epoch order, the model's schema and shape.
    private void Admit(IWatchedModel model, int epoch, EpochMetrics metrics)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(metrics);
        if (epoch < _lastEpoch)
            throw new DriftWatchException($"epoch {epoch} comes before epoch {_lastEpoch}, the last stored epoch of run '{_run.Name}'; epochs must increase: pass epoch {_lastEpoch + 1} or later");
        if (epoch == _lastEpoch)
        {
            if (IsComplete(_store.Epochs(_run.Id)[^1]))
                throw new DriftWatchException($"epoch {epoch} of run '{_run.Name}' is stored complete and is never replaced; pass epoch {epoch + 1} or later");
            _detector = CatchUp(before: epoch); // an incomplete epoch redone: the detector's state must not include its earlier attempt
        }
        CheckModel(model);
    }

    private bool IsAttributed(int epoch) => epoch % _options.AttributeEvery == 0;

    // A stored epoch is complete unless a step of it failed: the failures are its problems (attribution, snapshot).
    private static bool IsComplete(EpochDocument stored) => stored.Problems is not { Count: > 0 };

    // A run name with stored epochs is continued only when asked: a new training reusing the name would otherwise mix
    // into the earlier one's history. Checked before the run's record is touched, so a refusal changes nothing.
    private void RefuseUnlessNoEpochs(RunDocument existing)
    {
        int last = _store.Epochs(existing.Id).Select(e => e.Epoch).DefaultIfEmpty(-1).Max();
        if (last >= 0)
        {
            throw new DriftWatchException(
                $"run '{existing.Name}' already has epochs up to {last} in '{_store.Path}'; set MonitorOptions.Resume = true to continue it from epoch {last + 1}, or choose a new run name");
        }
    }

    // The epoch's maps, quality figures and layer maps; a step that failed is one monitoring-failure finding.
    private EpochMaps Attribute(IWatchedModel model, int epoch, List<Finding> failures)
    {
        var attributed = _attribution.Attribute(model, _run.Id, epoch);
        failures.AddRange(attributed.Problems.Select(p => Failure(epoch, p.Text)));
        return attributed;
    }

    // The weights in memory, before the epoch's transaction: a model that cannot be saved costs the snapshot, not the epoch.
    private MemoryStream? Snapshot(IWatchedModel model, int epoch, List<Finding> failures)
    {
        var weights = new MemoryStream();
        try
        {
            using (var writer = new BinaryWriter(weights, System.Text.Encoding.UTF8, leaveOpen: true))
                model.Module.save(writer);
            weights.Position = 0;
            return weights;
        }
        catch (Exception e) when (!_options.Strict)
        {
            weights.Dispose();
            failures.Add(Failure(epoch, "snapshot", e));
            return null;
        }
    }

    private Verdict DetectAndRecord(int epoch, EpochMetrics metrics, EpochMaps attributed, MemoryStream? weights, List<Finding> failures, Func<double> monitorSeconds)
    {
        var values = metrics.ToDictionary();
        var assessment = Detect(epoch, values, attributed, failures);
        Record(epoch, values, attributed, weights, assessment, failures, monitorSeconds);
        _lastEpoch = epoch;
        return assessment.Verdict;
    }

    // The detector's judgement: the first method's map makes the verdict, the others' detectors run beside it.
    private Assessment Detect(int epoch, Dictionary<string, double> values, EpochMaps attributed, List<Finding> failures)
    {
        var primary = attributed.Maps.FirstOrDefault(m => m.Document.Method == _options.Methods[0].Name);
        return _detector.Observe(
            new EpochInput(epoch, values, primary?.Map, [.. failures]),
            attributed.Maps.ToDictionary(m => m.Document.Method, m => m.Map, StringComparer.Ordinal));
    }

    // One transaction per epoch: maps, snapshot, statistics, verdict and the epoch's document (the marker readers and a
    // resumed run look for) land together or not at all, and the file is opened once.
    private void Record(int epoch, Dictionary<string, double> values, EpochMaps attributed, MemoryStream? weights, Assessment assessment, List<Finding> failures, Func<double> monitorSeconds)
    {
        try
        {
            var storeClock = Stopwatch.StartNew();
            _store.InOneTransaction(() =>
            {
                foreach (var map in attributed.Maps)
                {
                    _store.WriteMap(map.Document);
                    if (map.Quality is not null)
                        _store.WriteQuality(map.Quality);
                }
                foreach (var layerMap in attributed.LayerMaps)
                    _store.WriteLayerMap(layerMap);
                string? snapshot = weights is null ? null : _store.SaveSnapshot(_run.Id, epoch, weights);
                _store.WriteStatistics(new StatisticsDocument { RunId = _run.Id, Epoch = epoch, Statistics = assessment.Statistics });
                _store.WriteVerdict(VerdictDocuments.ToDocument(assessment.Verdict, _run.Id));
                _store.RefreshWriter(_run, _options.Time.GetUtcNow().UtcDateTime); // refused when another writer took the run over
                _store.WriteEpoch(new EpochDocument
                {
                    RunId = _run.Id,
                    Epoch = epoch,
                    Metrics = values,
                    SnapshotId = snapshot,
                    RecordedUtc = _options.Time.GetUtcNow().UtcDateTime,
                    Problems = failures.Select(f => f.Evidence).ToList(),
                    MonitorSeconds = monitorSeconds(),
                    StoreSeconds = storeClock.Elapsed.TotalSeconds,
                });
            });
        }
        catch
        {
            // Nothing of this epoch was stored: the detector must not remember it either.
            _detector = CatchUp(before: epoch);
            throw;
        }
    }

    private static Verdict FailureVerdict(int epoch, List<Finding> failures, Exception e)
    {
        failures.Add(Failure(epoch, "monitoring", e));
        var kind = failures.Max(f => f.Severity);
        return new Verdict(epoch, kind, failures.Select(f => f.Evidence).ToImmutableArray(), [.. failures]);
    }

    private static Finding Failure(int epoch, string where, Exception e) => Failure(epoch, AttributionProblem.Describe(where, epoch, e));

    private static Finding Failure(int epoch, string evidence) => Detection.Rules.MonitoringFailureRule.Failure(epoch, evidence);

    /// <summary>
    /// Loads the weight snapshot of the run's last complete epoch into <paramref name="module"/> and returns that epoch,
    /// so a resumed training loop continues from <c>LastEpoch + 1</c> with the weights it had.
    /// </summary>
    /// <remarks>Only the weights are restored: optimizer state, learning-rate schedules and data order are the loop's to restore.</remarks>
    /// <exception cref="DriftWatchException">The run has no complete epoch, its last epoch has no snapshot, or the snapshot does not fit the module.</exception>
    public int RestoreLastSnapshot(nn.Module module)
    {
        ArgumentNullException.ThrowIfNull(module);
        WaitForPendingEpoch();
        var last = _store.Epochs(_run.Id).LastOrDefault()
            ?? throw new DriftWatchException($"run '{_run.Name}' has no complete epoch in '{_store.Path}' to restore; start it from its first epoch");
        if (last.SnapshotId is null)
            throw new DriftWatchException($"epoch {last.Epoch} of run '{_run.Name}' has no weight snapshot (snapshots were off or failed); the run cannot continue from the store");
        if (_run.ModelShape.Length > 0 && _run.ModelShape != ModelShape(module))
            throw new DriftWatchException($"run '{_run.Name}' was recorded with a model of another shape; its snapshot cannot be loaded into this model");
        using var weights = _store.ReadSnapshot(last.SnapshotId);
        try
        {
            module.load(weights);
        }
        catch (Exception e) when (e is ArgumentException or InvalidOperationException or IOException or FormatException)
        {
            throw new DriftWatchException($"the snapshot of epoch {last.Epoch} of run '{_run.Name}' could not be loaded: {e.Message}", e);
        }
        return last.Epoch;
    }

    /// <summary>Waits for the epoch being attributed in the background, if any, then closes the store.</summary>
    /// <remarks>With <see cref="MonitorOptions.Strict"/> on, a failure of that epoch's background work is rethrown after the store is closed.</remarks>
    public void Dispose()
    {
        if (_disposed)
            return;
        _disposed = true;
        Exception? failure = null;
        try
        {
            WaitForPendingEpoch();
        }
        catch (Exception e)
        {
            failure = e;
        }
        finally
        {
            _copy?.Module.Dispose();
            _store.ReleaseWriter(_run.Id);
            _store.Dispose();
        }
        if (failure is not null)
            System.Runtime.ExceptionServices.ExceptionDispatchInfo.Throw(failure);
    }

    // The one attribution path, configured from the options.
    private static EpochAttribution AttributionOf(MonitorOptions options) => new()
    {
        Probe = options.Probe,
        Schema = options.Schema,
        Methods = options.Methods,
        Target = options.Target,
        Baseline = options.Baseline,
        ChunkRows = options.ChunkRows,
        MemoryBudgetBytes = options.MemoryBudgetBytes,
        Quality = options.Quality,
        WatchedLayers = options.WatchedLayers.IsDefault ? [] : options.WatchedLayers,
        LayerMethods = options.LayerMethods,
        Strict = options.Strict,
    };

    private void CheckModel(IWatchedModel model)
    {
        if (ReferenceEquals(_checkedModel, model))
            return;
        if (!model.Schema.Names.SequenceEqual(_options.Schema.Names) || model.Schema.ColumnCount != _options.Schema.ColumnCount)
            throw new DriftWatchException("the model's schema differs from the schema the monitor was configured with; pass model.Schema in MonitorOptions");
        string shape = ModelShape(model.Module);
        if (_copy is not null && ModelShape(_copy.Module) != shape)
            throw new DriftWatchException($"the model that Model's factory '{_options.Model!.FactoryName}' builds has another shape than the model being trained; background attribution loads each epoch's weights into it, so give the factory the trained model's settings");
        if (_run.ModelShape.Length > 0 && _run.ModelShape != shape)
            throw new DriftWatchException($"run '{_run.Name}' was recorded with a model of another shape; use a new run name for a different model");
        bool learnsRecipe = _run.ModelFactory.Length == 0 && model is IRebuildableModel;
        if (learnsRecipe)
        {
            // A ready model family records how it is rebuilt, so the run's snapshots can be re-attributed later.
            var recipe = ((IRebuildableModel)model).Recipe;
            _run.ModelFactory = recipe.FactoryName;
            _run.ModelSettings = new Dictionary<string, string>(recipe.Settings, StringComparer.Ordinal);
        }
        if (_run.ModelShape.Length == 0 || learnsRecipe)
        {
            _run.ModelShape = shape;
            _store.UpdateRun(_run);
        }
        _checkedModel = model;
    }

    // The copy background attribution loads each epoch's weights into; built here, on the caller's thread, without moving
    // the caller's random stream (building draws fresh weights).
    private static IWatchedModel BuildCopy(ModelRecipe recipe)
    {
        using var state = torch.random.get_rng_state();
        try
        {
            return recipe.Build();
        }
        finally
        {
            torch.random.set_rng_state(state);
        }
    }

    // A fresh detector fed the stored epochs before the given one, so a resumed run judges as if never interrupted.
    private CrossMethodDetector CatchUp(int before)
    {
        var methods = _options.Methods.Select(m => m.Name).ToList();
        var detector = new CrossMethodDetector(RunContext.FromRun(_run), _options.Policy, methods);
        var maps = RunReview.MapsByEpoch(_store, _run.Id, methods);
        foreach (var stored in _store.Epochs(_run.Id).Where(e => e.Epoch < before))
            RunReview.Observe(detector, stored, maps.GetValueOrDefault(stored.Epoch));
        return detector;
    }

    private static string ModelShape(nn.Module module) =>
        string.Join(";", module.named_parameters().Select(p => $"{p.name}[{string.Join("x", p.parameter.shape)}]"));

    private static RunDocument Describe(MonitorOptions options)
    {
        var probe = options.Probe;
        return new RunDocument
        {
            Name = options.RunName,
            CreatedUtc = options.Time.GetUtcNow().UtcDateTime,
            Description = options.Description,
            Features = options.Schema.Features.Select(f => new FeatureDocument
            {
                Name = f.Name,
                Kind = f.Kind.ToString(),
                FirstColumn = f.FirstColumn,
                ColumnCount = f.ColumnCount,
            }).ToList(),
            ProbeHash = probe.Hash,
            HeldOutRows = probe.HeldOutCount,
            TrainingRows = probe.TrainingCount,
            DenseCount = probe.Rows.DenseCount,
            CategoricalCount = probe.Rows.CategoricalCount,
            ProbeDense = FloatBytes.FromFloats(probe.Rows.Dense),
            ProbeCategorical = FloatBytes.FromLongs(probe.Rows.Categorical),
            ProbeLabels = probe.Rows.Labels is null ? null : FloatBytes.FromFloats(probe.Rows.Labels),
            Methods = options.Methods.Select(m => new MethodDocument { Name = m.Name, Settings = new Dictionary<string, string>(m.Settings) }).ToList(),
            Target = options.Target.Label,
            Baseline = options.Baseline.Label,
            Policy = options.Policy.ToJson(),
            ModelFactory = RecipeOf(options)?.FactoryName ?? "",
            RunFolder = options.RunFolder,
            ModelSettings = RecipeOf(options) is { } recipe ? new Dictionary<string, string>(recipe.Settings, StringComparer.Ordinal) : [],
            BaselineValues = options.Baseline.Values is null ? null : FloatBytes.FromFloats(options.Baseline.Values),
            WatchedLayers = options.WatchedLayers.IsDefault ? [] : [.. options.WatchedLayers],
            LayerMethods = options.WatchedLayers.IsDefaultOrEmpty
                ? []
                : options.LayerMethods.Select(m => new MethodDocument { Name = m.Name, Settings = new Dictionary<string, string>(m.Settings) }).ToList(),
            SplitCheck = SplitCheckDocuments.From(probe.SplitCheck),
            TrainingValueCounts = SplitCheckDocuments.ValueCounts(options.Schema, probe, options.TrainingValueCounts).ToDictionary(
                kv => kv.Key,
                kv => kv.Value.ToDictionary(v => v.Key.ToString(CultureInfo.InvariantCulture), v => v.Value)),
        };
    }

    // The recipe given in the options, or else the one a ready model family knows of itself.
    private static ModelRecipe? RecipeOf(MonitorOptions options) => options.Model ?? (options.WatchedModel as IRebuildableModel)?.Recipe;

    private RunDocument Resume(RunDocument existing, RunDocument wanted)
    {
        string Mismatch(string what) =>
            $"run '{existing.Name}' already exists in '{_store.Path}' with a different {what}; resume it with the same settings or choose a new run name";
        if (!existing.Features.SequenceEqual(wanted.Features))
            throw new DriftWatchException(Mismatch("feature schema"));
        if (existing.ProbeHash != wanted.ProbeHash)
            throw new DriftWatchException(Mismatch("probe set (hash " + existing.ProbeHash[..12] + " stored, " + wanted.ProbeHash[..12] + " given)"));
        if (existing.Target != wanted.Target || existing.Baseline != wanted.Baseline)
            throw new DriftWatchException(Mismatch("target or baseline"));
        static string Methods(IEnumerable<MethodDocument> methods) => string.Join("; ", methods.Select(m => m.Name + "(" + string.Join(",", m.Settings.OrderBy(s => s.Key, StringComparer.Ordinal).Select(s => s.Key + "=" + s.Value)) + ")"));
        if (Methods(existing.Methods) != Methods(wanted.Methods))
            throw new DriftWatchException(Mismatch("set of attribution method settings"));
        bool learn = false;
        if (existing.WatchedLayers is null || existing.LayerMethods is null)
        {
            // Registered before watched layers were recorded: the run learns them now.
            existing.WatchedLayers = wanted.WatchedLayers;
            existing.LayerMethods = wanted.LayerMethods;
            learn = true;
        }
        else if (!existing.WatchedLayers.Order(StringComparer.Ordinal).SequenceEqual((wanted.WatchedLayers ?? []).Order(StringComparer.Ordinal), StringComparer.Ordinal))
        {
            // Layer maps of one run are compared epoch by epoch (neuron audit, pruning what-if): the layers must not change.
            string Layers(List<string>? layers) => layers is null || layers.Count == 0 ? "none" : string.Join(", ", layers);
            throw new DriftWatchException(Mismatch($"set of watched layers ({Layers(existing.WatchedLayers)} stored, {Layers(wanted.WatchedLayers)} given)"));
        }
        else if (Methods(existing.LayerMethods) != Methods(wanted.LayerMethods ?? []))
        {
            throw new DriftWatchException(Mismatch("set of layer method settings"));
        }
        if (existing.ModelFactory.Length == 0 && wanted.ModelFactory.Length > 0)
        {
            // A run begun without a model recipe learns it on resume, so its snapshots can be re-attributed.
            existing.ModelFactory = wanted.ModelFactory;
            existing.ModelSettings = wanted.ModelSettings;
            learn = true;
        }
        if (existing.RunFolder is null && wanted.RunFolder is not null)
        {
            // A followed run stored before its folder was recorded learns where its TorchScript snapshots are.
            existing.RunFolder = wanted.RunFolder;
            learn = true;
        }
        if (learn)
            _store.UpdateRun(existing);
        return existing;
    }
}
