using System.Buffers.Binary;
using System.Collections.Frozen;
using System.Collections.Immutable;
using System.Text;
using DriftWatch.Detection;
using LiteDB;

namespace DriftWatch.Storage;

/// <summary>
/// The run store: one LiteDB file holding many runs, their epochs, attribution maps, verdicts and weight snapshots.
/// </summary>
/// <remarks>
/// Opened in LiteDB's shared mode, so a reader (the CLI) can open the file while a training process writes it.
/// An epoch's document is written after its maps and snapshot, so an epoch listed by <see cref="Epochs"/> is complete.
/// Thread-safe for one writer and any number of readers.
/// </remarks>
public sealed partial class RunStore : IDisposable
{
    /// <summary>The store format this version writes and reads.</summary>
    public const int FormatVersion = 1;

    /// <summary>
    /// The longest run name a store takes, in UTF-8 bytes: 512. The unique name index keeps each name whole, and LiteDB
    /// refuses index keys of 1,023 bytes or more; 512 leaves room for the key's own encoding.
    /// </summary>
    public const int MaximumRunNameBytes = 512;

    /// <summary>
    /// The most features a run takes: 20,000. Each epoch stores its per-feature figures (a map's per-half aggregates, the
    /// detector's statistics) in single LiteDB documents, which LiteDB limits to 16 MiB.
    /// </summary>
    public const int MaximumFeatures = 20_000;

    /// <summary>
    /// The most bytes an epoch's attribution map may take: 15,000,000. A map is one LiteDB document (LiteDB limits
    /// documents to 16 MiB) of 4 bytes per probe row and feature, 8 bytes per row (convergence delta and output gap)
    /// and about 140 bytes per feature (the per-half aggregates); <see cref="MapBytes"/> measures it. With 13 features
    /// that is at most about 250,000 probe rows.
    /// </summary>
    public const long MaximumMapBytes = 15_000_000;

    /// <summary>
    /// The most bytes the probe rows may take in the run's record: 12,000,000 (4 bytes per dense input, 8 per categorical
    /// input and 4 per label, per row). The run's record holds them whole, beside the feature schema, in one document.
    /// </summary>
    public const long MaximumProbeBytes = 12_000_000;

    // LiteDB 5 refuses documents over 16,683,050 bytes; the run's record is measured against a round bound below it.
    private const int MaximumDocumentBytes = 16_000_000;

    private const string MetaCollection = "driftwatch";
    private static readonly byte[] LiteDbSignature = Encoding.ASCII.GetBytes("** This is a LiteDB file **");

    // LiteDB 5 data files (file version 8): 8 KiB pages; the header page holds the last page id at byte 64.
    private const int PageSize = 8192;
    private const int LastPageOffset = 64;

    // The document type of every collection the store keeps; the mapper maps these and every stored type nested in them.
    // Declared before the mapper, since static fields are initialised in textual order.
    private static readonly ImmutableArray<Type> CollectionTypes =
    [
        typeof(RunDocument),
        typeof(EpochDocument),
        typeof(MapDocument),
        typeof(VerdictDocument),
        typeof(StatisticsDocument),
        typeof(MapQualityDocument),
        typeof(ShardDocument),
        typeof(LayerMapDocument),
    ];

    // LiteDB's global mapper turns "" into null and trims strings; names from users' data must come back exactly as written.
    private static readonly (BsonMapper Mapper, FrozenSet<Type> Types) Mapping = CreateMapper();

    private static BsonMapper Mapper => Mapping.Mapper;

    private readonly LiteDatabase _database;
    private bool? _namesAreOrdinal;

    private RunStore(LiteDatabase database, string path)
    {
        _database = database;
        Path = path;
    }

    /// <summary>The store file's path.</summary>
    public string Path { get; }

    private ILiteCollection<RunDocument> RunsCollection => _database.GetCollection<RunDocument>("runs");

    private ILiteCollection<EpochDocument> EpochsCollection => _database.GetCollection<EpochDocument>("epochs");

    private ILiteCollection<MapDocument> MapsCollection => _database.GetCollection<MapDocument>("maps");

    private ILiteCollection<VerdictDocument> VerdictsCollection => _database.GetCollection<VerdictDocument>("verdicts");

    private ILiteCollection<StatisticsDocument> StatisticsCollection => _database.GetCollection<StatisticsDocument>("statistics");

    private ILiteCollection<MapQualityDocument> QualityCollection => _database.GetCollection<MapQualityDocument>("quality");

    private ILiteCollection<ShardDocument> ShardsCollection => _database.GetCollection<ShardDocument>("shards");
    private ILiteCollection<LayerMapDocument> LayerMapsCollection => _database.GetCollection<LayerMapDocument>("layers");

    /// <summary>Opens a store for writing, creating the file (and its folder) when missing.</summary>
    /// <exception cref="StoreException">The path is a folder, or the file is not a DriftWatch store.</exception>
    public static RunStore OpenForWriting(string path)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        string full = System.IO.Path.GetFullPath(path);
        CheckNotFolder(full);
        if (File.Exists(full))
            CheckFile(full);
        else
            Directory.CreateDirectory(System.IO.Path.GetDirectoryName(full)!);
        var store = Open(full, readOnly: false);
        try
        {
            store.EnsureSchema();
            return store;
        }
        catch
        {
            store.Dispose();
            throw;
        }
    }

    /// <summary>Opens an existing store for reading; never creates or changes a file.</summary>
    /// <exception cref="StoreException">Missing, empty, truncated, foreign or newer-format file.</exception>
    public static RunStore OpenForReading(string path)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        string full = System.IO.Path.GetFullPath(path);
        CheckNotFolder(full);
        if (!File.Exists(full))
            throw new StoreException($"store file '{full}' does not exist; run the demo or a monitored training first, or pass --store PATH");
        CheckFile(full);
        var store = Open(full, readOnly: true);
        try
        {
            store.CheckFormat();
            return store;
        }
        catch
        {
            store.Dispose();
            throw;
        }
    }

    /// <summary>All runs, in creation order.</summary>
    internal IReadOnlyList<RunDocument> Runs() => Guard(() => RunsCollection.FindAll().Select(r => StoreChecks.Run(Path, r)).OrderBy(r => r.Id).ToList());

    /// <summary>The run with exactly this name (ordinal, case-sensitive), or null.</summary>
    /// <remarks>
    /// In a store created with ordinal names the name index finds it. An older store's index compares names by the culture
    /// of the process that wrote it, ignoring case, in an order this process may not reproduce (ICU against invariant
    /// mode), so a lookup through it can miss a name that is there or find another that differs in case: such a store's
    /// runs are scanned instead, which reads every run record and writes nothing.
    /// </remarks>
    internal RunDocument? FindRun(string name)
    {
        ArgumentNullException.ThrowIfNull(name);
        return Guard(() =>
        {
            var run = NamesAreOrdinal
                ? RunsCollection.FindOne(BsonExpression.Create("$.Name = @0", new BsonValue(name)))
                : RunsCollection.FindAll().FirstOrDefault(r => string.Equals(r.Name, name, StringComparison.Ordinal));
            return run is not null && string.Equals(run.Name, name, StringComparison.Ordinal) ? StoreChecks.Run(Path, run) : null;
        });
    }

    // Whether the file's collation compares strings ordinally (every store this version creates), read once from its header.
    private bool NamesAreOrdinal => _namesAreOrdinal ??= Guard(() =>
        _database.Pragma("COLLATION").AsString.EndsWith("/" + nameof(System.Globalization.CompareOptions.Ordinal), StringComparison.Ordinal));

    /// <summary>The run with this name.</summary>
    /// <exception cref="StoreException">No such run; the message lists the runs there are.</exception>
    internal RunDocument GetRun(string name)
    {
        var run = FindRun(name);
        if (run is not null)
            return run;
        var names = Runs().Select(r => r.Name).ToList();
        string known = names.Count == 0 ? "the store has no runs" : "runs in the store: " + string.Join(", ", names);
        throw new StoreException($"no run named '{name}' in '{Path}'; {known}");
    }

    /// <summary>
    /// The bytes an epoch's map of <paramref name="rows"/> probe rows × <paramref name="features"/> features takes as a
    /// store document, at most: the scores, the per-row deltas and output gaps, and the per-half aggregates (four arrays
    /// of doubles per half, each element of a BSON array 1 type byte, up to 7 bytes of its index as a key, 8 of value).
    /// </summary>
    public static long MapBytes(long rows, long features) => (4 * rows * features) + (2 * 4 * rows) + (2 * 4 * 16 * features) + 4096;

    /// <summary>
    /// The problem with storing <paramref name="run"/>'s record, measured before any store is opened, or null when it fits:
    /// a name over <see cref="MaximumRunNameBytes"/> or a record over LiteDB's document limit.
    /// </summary>
    internal static string? TooLarge(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        int nameBytes = Encoding.UTF8.GetByteCount(run.Name);
        if (nameBytes > MaximumRunNameBytes)
            return string.Create(System.Globalization.CultureInfo.InvariantCulture, $"run name is {nameBytes:N0} bytes in UTF-8; a store takes names of at most {MaximumRunNameBytes} bytes (its name index keeps each name whole); choose a shorter name");
        int bytes = BsonSerializer.Serialize(Mapper.ToDocument(run)).Length;
        if (bytes > MaximumDocumentBytes)
            return string.Create(System.Globalization.CultureInfo.InvariantCulture, $"the run's record (schema, probe rows, value counts) would take {bytes:N0} bytes; a store keeps it in one document of at most {MaximumDocumentBytes:N0} bytes; use fewer probe rows, shorter feature names or fewer counted categorical values");
        return null;
    }

    /// <summary>Registers a new run and returns it with its id.</summary>
    internal RunDocument AddRun(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        if (TooLarge(run) is { } problem)
            throw new StoreException(problem);
        return Guard(() =>
        {
            if (FindRun(run.Name) is not null)
                throw new StoreException($"a run named '{run.Name}' already exists in '{Path}'");
            // An older store's unique name index ignores case: the insert would fail with LiteDB's duplicate-key message.
            if (!NamesAreOrdinal && Runs().FirstOrDefault(r => string.Equals(r.Name, run.Name, StringComparison.OrdinalIgnoreCase)) is { } other)
            {
                throw new StoreException(
                    $"store '{Path}' was created by an older DriftWatch whose run names ignore case, so run '{run.Name}' cannot be stored beside run '{other.Name}'; choose a name that differs in more than case, or use a new store file");
            }
            var copy = run with { Id = 0 };
            RunsCollection.Insert(copy);
            return copy;
        });
    }

    /// <summary>
    /// Runs <paramref name="write"/> as one transaction: every write inside lands together or, when one fails, none does.
    /// The file stays open for the whole transaction, so readers wait for it rather than see part of it.
    /// </summary>
    public void InOneTransaction(Action write)
    {
        ArgumentNullException.ThrowIfNull(write);
        Guard(() =>
        {
            bool began = _database.BeginTrans();
            try
            {
                write();
                if (began)
                    _database.Commit();
            }
            catch
            {
                if (began)
                    _database.Rollback();
                throw;
            }
        });
    }

    /// <summary>Replaces a run's record (same id).</summary>
    internal void UpdateRun(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        Guard(() => RunsCollection.Update(run));
    }

    /// <summary>Writes a map, replacing any earlier map with the same key (a resumed epoch).</summary>
    internal void WriteMap(MapDocument map)
    {
        ArgumentNullException.ThrowIfNull(map);
        Guard(() => Upsert(MapsCollection, map with { Key = MapKey(map.RunId, map.Epoch, map.Method, map.Target) }));
    }

    /// <summary>Writes an epoch's document, marking it complete; an earlier document for the same epoch is replaced.</summary>
    internal void WriteEpoch(EpochDocument epoch)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        Guard(() => Upsert(EpochsCollection, epoch with { Key = EpochKey(epoch.RunId, epoch.Epoch) }));
    }

    /// <summary>Writes a verdict, replacing an earlier one for the same epoch.</summary>
    internal void WriteVerdict(VerdictDocument verdict)
    {
        ArgumentNullException.ThrowIfNull(verdict);
        Guard(() => Upsert(VerdictsCollection, verdict with { Key = EpochKey(verdict.RunId, verdict.Epoch) }));
    }

    /// <summary>Writes an epoch's detector statistics, replacing earlier ones for the same epoch.</summary>
    internal void WriteStatistics(StatisticsDocument statistics)
    {
        ArgumentNullException.ThrowIfNull(statistics);
        Guard(() => Upsert(StatisticsCollection, statistics with { Key = EpochKey(statistics.RunId, statistics.Epoch) }));
    }

    /// <summary>The detector statistics of a run's complete epochs, in epoch order.</summary>
    internal IReadOnlyList<StatisticsDocument> StatisticsOf(int runId)
    {
        return Guard(() =>
        {
            var complete = EpochsCollection.Find(e => e.RunId == runId).Select(e => e.Epoch).ToHashSet();
            return StatisticsCollection.Find(s => s.RunId == runId).Where(s => complete.Contains(s.Epoch)).OrderBy(s => s.Epoch).ToList();
        });
    }

    /// <summary>Writes (or replaces) one layer map, keyed by run, epoch, layer, method and target.</summary>
    internal void WriteLayerMap(LayerMapDocument map)
    {
        ArgumentNullException.ThrowIfNull(map);
        Guard(() => Upsert(LayerMapsCollection, map with { Key = $"{map.RunId}/{map.Epoch:D6}/{map.Layer}/{map.Method}/{map.Target}" }));
    }

    /// <summary>The layer maps of a run for one layer (and method, when given), of complete epochs only, in epoch order.</summary>
    /// <exception cref="StoreException">A map's arrays do not match its shape (a damaged store).</exception>
    internal IReadOnlyList<LayerMapDocument> LayerMaps(int runId, string layer, string? method = null)
    {
        ArgumentNullException.ThrowIfNull(layer);
        return Guard(() =>
        {
            var complete = EpochsCollection.Find(e => e.RunId == runId).Select(e => e.Epoch).ToHashSet();
            var found = method is null
                ? LayerMapsCollection.Find(m => m.RunId == runId && m.Layer == layer)
                : LayerMapsCollection.Find(m => m.RunId == runId && m.Layer == layer && m.Method == method);
            return found.Where(m => complete.Contains(m.Epoch)).Select(m => StoreChecks.LayerMap(Path, m))
                .OrderBy(m => m.Epoch).ThenBy(m => m.Method, StringComparer.Ordinal).ToList();
        });
    }

    /// <summary>The (layer, method) pairs a run has layer maps for, in ordinal order.</summary>
    public IReadOnlyList<(string Layer, string Method)> LayerMapKinds(int runId) =>
        Guard(() => LayerMapsCollection.Find(m => m.RunId == runId).Select(m => (m.Layer, m.Method)).Distinct()
            .OrderBy(m => m.Layer, StringComparer.Ordinal).ThenBy(m => m.Method, StringComparer.Ordinal).ToList());

    /// <summary>Writes a map's agreement and quality figures, replacing an earlier document for the same map key.</summary>
    internal void WriteQuality(MapQualityDocument quality)
    {
        ArgumentNullException.ThrowIfNull(quality);
        Guard(() => Upsert(QualityCollection, quality with { Key = MapKey(quality.RunId, quality.Epoch, quality.Method, quality.Target) }));
    }

    /// <summary>The agreement and quality documents of a run's complete epochs, in epoch order; optionally one method only.</summary>
    internal IReadOnlyList<MapQualityDocument> Quality(int runId, string? method = null)
    {
        return Guard(() =>
        {
            var complete = EpochsCollection.Find(e => e.RunId == runId).Select(e => e.Epoch).ToHashSet();
            var documents = method is null
                ? QualityCollection.Find(q => q.RunId == runId)
                : QualityCollection.Find(q => q.RunId == runId && q.Method == method);
            return documents.Where(q => complete.Contains(q.Epoch)).OrderBy(q => q.Epoch).ThenBy(q => q.Method, StringComparer.Ordinal).ToList();
        });
    }

    /// <summary>Writes the shard record of a shard store, replacing the earlier one.</summary>
    internal void WriteShard(ShardDocument shard)
    {
        ArgumentNullException.ThrowIfNull(shard);
        Guard(() => Upsert(ShardsCollection, shard with { Key = "shard" }));
    }

    /// <summary>The shard record when this store is a shard store, else null.</summary>
    internal ShardDocument? FindShard() =>
        Guard(() => _database.CollectionExists("shards") ? ShardsCollection.FindOne(KeyIs("shard")) : null);

    /// <summary>The stored map for (run, epoch, method, target), or null.</summary>
    internal MapDocument? FindMap(int runId, int epoch, string method, string target)
    {
        ArgumentNullException.ThrowIfNull(method);
        ArgumentNullException.ThrowIfNull(target);
        string key = MapKey(runId, epoch, method, target);
        return Guard(() => MapsCollection.FindOne(KeyIs(key)));
    }

    /// <summary>Every map stored for one epoch of a run (all methods and targets), complete or not.</summary>
    internal IReadOnlyList<MapDocument> MapsAt(int runId, int epoch) =>
        Guard(() => MapsCollection.Find(m => m.RunId == runId && m.Epoch == epoch).OrderBy(m => m.Method, StringComparer.Ordinal).ToList());

    /// <summary>The distinct method names a run has maps under (configured and re-attributed), in ordinal order.</summary>
    public IReadOnlyList<string> MapMethods(int runId) =>
        Guard(() => MapsCollection.Query().Where(m => m.RunId == runId).Select(m => m.Method).ToList().Distinct().Order(StringComparer.Ordinal).ToList());

    /// <summary>Saves a weight snapshot and returns its file id.</summary>
    public string SaveSnapshot(int runId, int epoch, Stream weights)
    {
        ArgumentNullException.ThrowIfNull(weights);
        string id = $"snapshots/{runId}/{epoch:D6}";
        Guard(() =>
        {
            // A process killed while uploading this snapshot before leaves LiteDB's file record (length still 0, so
            // LiteDB keeps its chunks) and some chunks; a new upload would collide with them. Both go first.
            _database.FileStorage.Delete(id);
            _database.GetCollection("_chunks").DeleteMany(BsonExpression.Create(
                "_id BETWEEN @0 AND @1",
                new BsonDocument { ["f"] = id, ["n"] = 0 },
                new BsonDocument { ["f"] = id, ["n"] = int.MaxValue })); // a range of the _id index, not a scan
            _database.FileStorage.Upload(id, $"run{runId}-epoch{epoch}.weights", weights);
        });
        return id;
    }

    /// <summary>Reads a weight snapshot into memory.</summary>
    public MemoryStream ReadSnapshot(string snapshotId)
    {
        ArgumentNullException.ThrowIfNull(snapshotId);
        return Guard(() =>
        {
            var file = _database.FileStorage.FindById(snapshotId)
                ?? throw new StoreException($"snapshot '{snapshotId}' is not in '{Path}'");
            var memory = new MemoryStream();
            file.CopyTo(memory);
            memory.Position = 0;
            return memory;
        });
    }

    /// <summary>The complete epochs of a run, in epoch order.</summary>
    internal IReadOnlyList<EpochDocument> Epochs(int runId) =>
        Guard(() => EpochsCollection.Find(e => e.RunId == runId).Select(e => StoreChecks.Epoch(Path, e)).OrderBy(e => e.Epoch).ToList());

    /// <summary>The maps of a run's complete epochs, in epoch order; optionally one method only.</summary>
    internal IReadOnlyList<MapDocument> Maps(int runId, string? method = null)
    {
        var maps = new List<MapDocument>();
        VisitMaps(runId, method, maps.Add);
        return maps.OrderBy(m => m.Epoch).ThenBy(m => m.Method).ToList();
    }

    /// <summary>
    /// The maps of a run's complete epochs without their per-row arrays, in epoch order; optionally one method only.
    /// </summary>
    /// <remarks>
    /// <see cref="MapDocument.Scores"/> is empty and <see cref="MapDocument.Deltas"/> and <see cref="MapDocument.OutputGaps"/>
    /// are null; the per-half aggregates, settings and costs are kept. Each map is checked whole and then let go, so a
    /// run of 500 epochs × 200 features is read in a small fraction of the memory <see cref="Maps"/> needs.
    /// </remarks>
    internal IReadOnlyList<MapDocument> MapAggregates(int runId, string? method = null)
    {
        var maps = new List<MapDocument>();
        VisitMaps(runId, method, m => maps.Add(m with { Scores = [], Deltas = null, OutputGaps = null }));
        return maps.OrderBy(m => m.Epoch).ThenBy(m => m.Method).ToList();
    }

    /// <summary>
    /// Hands each checked map of a run's complete epochs to <paramref name="visit"/>, one at a time and in stored order,
    /// without holding them all; optionally one method only.
    /// </summary>
    internal void VisitMaps(int runId, string? method, Action<MapDocument> visit)
    {
        ArgumentNullException.ThrowIfNull(visit);
        Guard(() =>
        {
            var complete = EpochsCollection.Find(e => e.RunId == runId).Select(e => e.Epoch).ToHashSet();
            var maps = method is null
                ? MapsCollection.Find(m => m.RunId == runId)
                : MapsCollection.Find(m => m.RunId == runId && m.Method == method);
            var run = RunsCollection.FindById(runId);
            foreach (var map in maps)
            {
                if (complete.Contains(map.Epoch))
                    visit(StoreChecks.Map(Path, map, run));
            }
        });
    }

    /// <summary>The verdicts of a run's complete epochs, in epoch order.</summary>
    internal IReadOnlyList<VerdictDocument> Verdicts(int runId)
    {
        return Guard(() =>
        {
            var complete = EpochsCollection.Find(e => e.RunId == runId).Select(e => e.Epoch).ToHashSet();
            return VerdictsCollection.Find(v => v.RunId == runId).Where(v => complete.Contains(v.Epoch)).Select(v => StoreChecks.Verdict(Path, v)).OrderBy(v => v.Epoch).ToList();
        });
    }

    /// <summary>The gate's verdicts of a run's complete epochs, with their findings, in epoch order.</summary>
    /// <exception cref="StoreException">A stored verdict names a kind or severity this version does not know.</exception>
    public IReadOnlyList<Verdict> StoredVerdicts(int runId) => Verdicts(runId).Select(v =>
    {
        try
        {
            return VerdictDocuments.FromDocument(v);
        }
        catch (ArgumentException e)
        {
            throw new StoreException($"store '{Path}' holds a verdict at epoch {v.Epoch} of run {runId} that this version cannot read ({e.Message}); a severity is Continue, Caution or Halt and a kind is a name of letters and digits");
        }
    }).ToList();

    /// <summary>
    /// Checks the whole store for damage every reader would otherwise take for a healthy store, and returns one line per
    /// problem found (none for a sound store).
    /// </summary>
    /// <remarks>
    /// Finds a collection a writer always makes (runs, epochs, maps, verdicts, statistics; layers for a run that watches
    /// layers) gone, an epoch without its verdict or detector statistics, and an epoch, verdict, statistics, map or layer
    /// record whose run id or key was changed (it names no run, or its key does not match its run and epoch), and reads
    /// every run record and epoch record through the same checks as the readers. A damaged format record is refused
    /// when the store is opened. Reads only; safe while a monitor writes the store. LiteDB keeps no checksums, so damage
    /// inside a stored number cannot be found.
    /// </remarks>
    public IReadOnlyList<string> Verify()
    {
        var problems = new List<string>();
        // One read transaction: the file is opened once for every read of the check (not once per query, which kept a
        // writer waiting through a dozen openings), and the check sees one state of the store.
        InOneTransaction(() =>
        {
            problems.AddRange(StoreAudit.Problems(_database));
            foreach (var run in RunsCollection.FindAll().ToList())
            {
                try
                {
                    StoreChecks.Run(Path, run);
                    foreach (var epoch in EpochsCollection.Find(e => e.RunId == run.Id))
                        StoreChecks.Epoch(Path, epoch);
                    foreach (var verdict in VerdictsCollection.Find(v => v.RunId == run.Id))
                        StoreChecks.Verdict(Path, verdict);
                }
                catch (StoreException e)
                {
                    problems.Add(e.Message);
                }
            }
        });
        return problems;
    }

    /// <summary>Every run in the store, in the order they were registered.</summary>
    public IReadOnlyList<StoredRun> StoredRuns() => [.. Runs().Select(StoredRun.From)];

    /// <summary>The complete epochs of the run named <paramref name="runName"/>, in order.</summary>
    /// <exception cref="StoreException">No run of that name is in the store.</exception>
    public IReadOnlyList<StoredEpoch> StoredEpochs(string runName) => [.. Epochs(GetRun(runName).Id).Select(StoredEpoch.From)];

    /// <summary>The per-half importance of a run's maps at complete epochs, in epoch then method order; optionally one method only.</summary>
    public IReadOnlyList<StoredImportance> Importance(int runId, string? method = null) =>
        MapAggregates(runId, method).Select(StoredImportance.From).ToList();

    /// <inheritdoc />
    public void Dispose()
    {
        ReleaseWriters();
        _database.Dispose();
    }

    private static string EpochKey(int runId, int epoch) => $"{runId}/{epoch:D6}";

    private static string MapKey(int runId, int epoch, string method, string target) => $"{runId}/{epoch:D6}/{method}/{target}";

    // Key is unique: a resumed epoch replaces what an interrupted one wrote instead of duplicating it.
    // The value goes in as a parameter, not into the expression's text: LiteDB compiles every new expression text to a
    // delegate (System.Linq.Expressions, then the JIT) and caches it by that text, so a key written into the text cost a
    // fresh compilation on every write — a third of an epoch's store transaction. The unique Key index is still used.
    private static BsonExpression KeyIs(string key) => BsonExpression.Create("$.Key = @0", new BsonValue(key));

    private static void Upsert<T>(ILiteCollection<T> collection, T document)
        where T : class, IKeyedDocument
    {
        var existing = collection.FindOne(KeyIs(document.Key));
        if (existing is null)
        {
            collection.Insert(document);
            return;
        }
        document.Id = existing.Id;
        collection.Update(document);
    }

    private static RunStore Open(string full, bool readOnly)
    {
        try
        {
            // LiteDB's shared mode (one engine per operation under a named mutex), run by our own engine so that a
            // write the disk refuses leaves no LiteDB transaction for a finalizer to trip over (OrphanedTransactions).
            return new RunStore(new LiteDatabase(new SharedStoreEngine(full, readOnly), Mapper), full);
        }
        catch (LiteException e)
        {
            throw new StoreException($"'{full}' is not a readable DriftWatch store: {e.Message}", e);
        }
        catch (IOException e)
        {
            throw new StoreException($"cannot open store '{full}': {e.Message}", e);
        }
        catch (UnauthorizedAccessException e)
        {
            throw new StoreException($"no permission to open store '{full}': {e.Message}", e);
        }
    }

    // LiteDB's BsonMapper registers a type before filling in its members, so two threads meeting a stored type for the
    // first time at once (two stores opened side by side) could see it half-built: "Member Name not found on BsonMapper".
    // Every stored type is mapped here, once, inside the type initialiser; afterwards the mapper is only read.
    private static (BsonMapper Mapper, FrozenSet<Type> Types) CreateMapper()
    {
        var mapper = new BsonMapper { EmptyStringToNull = false, TrimWhitespace = false };
        // Frozen arrays are stored as the plain BSON arrays the mutable ones were, so documents read the same either way.
        mapper.RegisterType(
            values => new BsonArray(values.IsDefault ? [] : values.Select(v => new BsonValue(v))),
            bson => bson.IsArray ? [.. bson.AsArray.Select(v => v.AsDouble)] : ImmutableArray<double>.Empty);
        mapper.RegisterType(
            values => new BsonArray(values.IsDefault ? [] : values.Select(v => new BsonValue(v))),
            bson => bson.IsArray ? [.. bson.AsArray.Select(v => v.AsBoolean)] : ImmutableArray<bool>.Empty);
        var seen = new HashSet<Type>();
        var pending = new Stack<Type>(CollectionTypes);
        while (pending.TryPop(out var type))
        {
            if (!seen.Add(type))
                continue;
            mapper.ToDocument(type, Activator.CreateInstance(type)!);
            foreach (var property in type.GetProperties(System.Reflection.BindingFlags.Public | System.Reflection.BindingFlags.Instance))
            {
                foreach (var nested in StoredTypesIn(property.PropertyType))
                    pending.Push(nested);
            }
        }
        return (mapper, seen.ToFrozenSet());
    }

    /// <summary>Every type the store's mapper mapped up front: the collections' document types and the stored types nested in them.</summary>
    internal static FrozenSet<Type> MappedTypes => Mapping.Types;

    private static IEnumerable<Type> StoredTypesIn(Type type)
    {
        type = Nullable.GetUnderlyingType(type) ?? type;
        var parts = type.IsArray ? [type.GetElementType()!] : type.IsGenericType ? type.GetGenericArguments() : null;
        if (parts is not null)
            return parts.SelectMany(StoredTypesIn);
        return type.IsClass && type.Assembly == typeof(RunStore).Assembly ? [type] : [];
    }

    private static void CheckNotFolder(string full)
    {
        if (Directory.Exists(full))
            throw new StoreException($"store path '{full}' is a folder; pass a file path such as '{System.IO.Path.Combine(full, "runs.litedb")}'");
    }

    // Our own header check before LiteDB sees the file, so a foreign or damaged file is never opened, let alone changed.
    private static void CheckFile(string full)
    {
        var info = new FileInfo(full);
        if (info.Length == 0)
            throw new StoreException($"store file '{full}' is empty (0 bytes); it was never written or was truncated; delete it or pass another --store");
        var header = new byte[LastPageOffset + 4];
        int read;
        long length;
        try
        {
            using var stream = new FileStream(full, FileMode.Open, FileAccess.Read, FileShare.ReadWrite | FileShare.Delete);
            read = stream.ReadAtLeast(header, header.Length, throwOnEndOfStream: false);
            length = stream.Length; // after the header: a writer only ever lengthens the file, so this is at least the header's length unless it was cut
        }
        catch (UnauthorizedAccessException e)
        {
            // Every command that opens a store gets this one line, not only those that go through the CLI's common option.
            throw new StoreException($"no permission to read store '{full}' ({e.Message.ReplaceLineEndings(" ")}); give this user read permission on it (e.g. chmod u+r) or pass another --store", e);
        }
        if (read < 32 + LiteDbSignature.Length || !header.AsSpan(32, LiteDbSignature.Length).SequenceEqual(LiteDbSignature))
            throw new StoreException($"'{full}' is not a DriftWatch store (not a LiteDB file); pass the .litedb file a monitored run wrote");
        if (length < PageSize)
            throw new StoreException($"store file '{full}' is truncated ({length} bytes, less than one LiteDB header and data page)");

        // The header records the last page of the data file. A shorter file was cut off (an interrupted copy, a full disk);
        // LiteDB would fail later on a missing page with a message about page types. While a write-ahead log is beside the
        // file, a checkpoint may be half done (header first, pages after) and the log still holds the pages; a writer
        // clears the log only after the pages are in the file, so the length is taken again after looking for the log.
        long pages = (long)BinaryPrimitives.ReadUInt32LittleEndian(header.AsSpan(LastPageOffset)) + 1;
        if (length < pages * PageSize && !HasLog(full) && new FileInfo(full).Length < pages * PageSize)
        {
            throw new StoreException(
                $"store file '{full}' is truncated: {new FileInfo(full).Length} bytes, but its header records {pages} pages ({pages * PageSize} bytes); it was cut short (an interrupted copy or a full disk) — use an intact copy");
        }
    }

    // LiteDB 5 keeps its write-ahead log in NAME-log.EXT beside the data file.
    private static bool HasLog(string full)
    {
        string log = System.IO.Path.Combine(
            System.IO.Path.GetDirectoryName(full)!,
            System.IO.Path.GetFileNameWithoutExtension(full) + "-log" + System.IO.Path.GetExtension(full));
        return File.Exists(log) && new FileInfo(log).Length > 0;
    }

    private void EnsureSchema()
    {
        Guard(() =>
        {
            // Looked for and written in one transaction, which holds the file: two processes creating one new store at once
            // take turns, and the second finds the first one's record (and its collections) instead of inserting its own.
            InOneTransaction(() =>
            {
                var meta = _database.GetCollection(MetaCollection);
                if (meta.FindById("format") is not null)
                    return;
                if (HasForeignCollections())
                    throw new StoreException($"'{Path}' is a LiteDB file of another program, not a DriftWatch store; pass another --store");
                meta.Insert(new BsonDocument { ["_id"] = "format", ["version"] = FormatVersion });
            });
            CheckFormat();
            RunsCollection.EnsureIndex(r => r.Name, unique: true);
            EpochsCollection.EnsureIndex(e => e.Key, unique: true);
            EpochsCollection.EnsureIndex(e => e.RunId);
            MapsCollection.EnsureIndex(m => m.Key, unique: true);
            MapsCollection.EnsureIndex(m => m.RunId);
            VerdictsCollection.EnsureIndex(v => v.Key, unique: true);
            VerdictsCollection.EnsureIndex(v => v.RunId);
            StatisticsCollection.EnsureIndex(s => s.Key, unique: true);
            StatisticsCollection.EnsureIndex(s => s.RunId);
            QualityCollection.EnsureIndex(q => q.Key, unique: true);
            QualityCollection.EnsureIndex(q => q.RunId);
            LayerMapsCollection.EnsureIndex(l => l.Key, unique: true);
            LayerMapsCollection.EnsureIndex(l => l.RunId);
        });
    }

    private bool HasForeignCollections() => _database.GetCollectionNames().Any(n => n != MetaCollection && !n.StartsWith('$'));

    private void CheckFormat()
    {
        Guard(() =>
        {
            var format = _database.GetCollection(MetaCollection).FindById("format");
            // A process killed while creating the store leaves a LiteDB file with nothing in it yet: a store with no runs.
            if (format is null && !HasForeignCollections())
                return;
            if (format is null)
                throw new StoreException($"'{Path}' is a LiteDB file but not a DriftWatch store (no format record); pass the file a monitored run wrote");
            // A missing, null or negative version once read as format 1 (LiteDB reads a missing number as 0): such a record
            // was damaged or written by hand, and nothing in the file can then be trusted to be what a format means.
            var stored = format["version"];
            if (!stored.IsInt32 || stored.AsInt32 < 1)
                throw new StoreException($"store '{Path}' has a damaged format record (version {(stored.IsNull ? "missing or null" : stored.ToString())}, not a format number of 1 or more); use an intact copy");
            int version = stored.AsInt32;
            if (version > FormatVersion)
                throw new StoreException($"store '{Path}' has format {version}, written by a newer DriftWatch; this version reads format {FormatVersion} and older — upgrade DriftWatch");
        });
    }

    private void Guard(Action action) => Guard(() =>
    {
        action();
        return 0;
    });

    private T Guard<T>(Func<T> action)
    {
        try
        {
            return action();
        }
        catch (LiteException e)
        {
            throw new StoreException($"store '{Path}' could not be read or written: {e.Message}", e);
        }
        catch (IOException e)
        {
            // A full disk, a read-only file system, a file removed underneath: LiteDB opens the file per operation in shared mode.
            throw new StoreException($"store '{Path}' could not be read or written: {e.Message}", e);
        }
        catch (UnauthorizedAccessException e)
        {
            throw new StoreException($"no permission to read or write store '{Path}': {e.Message}", e);
        }
        catch (Exception e) when (e is not DriftWatchException && ThrownInsideLiteDb(e))
        {
            // LiteDB has no checksums; a damaged page surfaces as whatever its decoder meets (bad UTF-8, an unknown BSON type).
            throw new StoreException($"store '{Path}' is damaged and could not be read ({e.GetType().Name}: {e.Message}); use an intact copy", e);
        }
    }

    private static bool ThrownInsideLiteDb(Exception e) =>
        e is not (OutOfMemoryException or ThreadAbortException or OperationCanceledException)
        && new System.Diagnostics.StackTrace(e, fNeedFileInfo: false).GetFrames().Any(f => f.GetMethod()?.DeclaringType?.Assembly == typeof(LiteDatabase).Assembly);
}
