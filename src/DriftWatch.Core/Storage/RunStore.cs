using System.Text;
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
public sealed class RunStore : IDisposable
{
    /// <summary>The store format this version writes and reads.</summary>
    public const int FormatVersion = 1;

    private const string MetaCollection = "driftwatch";
    private static readonly byte[] LiteDbSignature = Encoding.ASCII.GetBytes("** This is a LiteDB file **");

    // LiteDB's global mapper turns "" into null and trims strings; names from users' data must come back exactly as written.
    private static readonly BsonMapper Mapper = new() { EmptyStringToNull = false, TrimWhitespace = false };

    private readonly LiteDatabase _database;

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
    public IReadOnlyList<RunDocument> Runs() => Guard(() => RunsCollection.FindAll().OrderBy(r => r.Id).ToList());

    /// <summary>The run with this name, or null.</summary>
    public RunDocument? FindRun(string name) => Guard(() => RunsCollection.FindOne(r => r.Name == name));

    /// <summary>The run with this name.</summary>
    /// <exception cref="StoreException">No such run; the message lists the runs there are.</exception>
    public RunDocument GetRun(string name)
    {
        var run = FindRun(name);
        if (run is not null)
            return run;
        var names = Runs().Select(r => r.Name).ToList();
        string known = names.Count == 0 ? "the store has no runs" : "runs in the store: " + string.Join(", ", names);
        throw new StoreException($"no run named '{name}' in '{Path}'; {known}");
    }

    /// <summary>Registers a new run and returns it with its id.</summary>
    public RunDocument AddRun(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        return Guard(() =>
        {
            if (FindRun(run.Name) is not null)
                throw new StoreException($"a run named '{run.Name}' already exists in '{Path}'");
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
    public void UpdateRun(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        Guard(() => RunsCollection.Update(run));
    }

    /// <summary>Writes a map, replacing any earlier map with the same key (a resumed epoch).</summary>
    public void WriteMap(MapDocument map)
    {
        ArgumentNullException.ThrowIfNull(map);
        Guard(() => Upsert(MapsCollection, map with { Key = MapKey(map.RunId, map.Epoch, map.Method, map.Target) }));
    }

    /// <summary>Writes an epoch's document, marking it complete; an earlier document for the same epoch is replaced.</summary>
    public void WriteEpoch(EpochDocument epoch)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        Guard(() => Upsert(EpochsCollection, epoch with { Key = EpochKey(epoch.RunId, epoch.Epoch) }));
    }

    /// <summary>Writes a verdict, replacing an earlier one for the same epoch.</summary>
    public void WriteVerdict(VerdictDocument verdict)
    {
        ArgumentNullException.ThrowIfNull(verdict);
        Guard(() => Upsert(VerdictsCollection, verdict with { Key = EpochKey(verdict.RunId, verdict.Epoch) }));
    }

    /// <summary>Writes an epoch's detector statistics, replacing earlier ones for the same epoch.</summary>
    public void WriteStatistics(StatisticsDocument statistics)
    {
        ArgumentNullException.ThrowIfNull(statistics);
        Guard(() => Upsert(StatisticsCollection, statistics with { Key = EpochKey(statistics.RunId, statistics.Epoch) }));
    }

    /// <summary>The detector statistics of a run's complete epochs, in epoch order.</summary>
    public IReadOnlyList<StatisticsDocument> StatisticsOf(int runId)
    {
        return Guard(() =>
        {
            var complete = EpochsCollection.Find(e => e.RunId == runId).Select(e => e.Epoch).ToHashSet();
            return StatisticsCollection.Find(s => s.RunId == runId).Where(s => complete.Contains(s.Epoch)).OrderBy(s => s.Epoch).ToList();
        });
    }

    /// <summary>Writes a map's agreement and quality figures, replacing an earlier document for the same map key.</summary>
    public void WriteQuality(MapQualityDocument quality)
    {
        ArgumentNullException.ThrowIfNull(quality);
        Guard(() => Upsert(QualityCollection, quality with { Key = MapKey(quality.RunId, quality.Epoch, quality.Method, quality.Target) }));
    }

    /// <summary>The agreement and quality documents of a run's complete epochs, in epoch order; optionally one method only.</summary>
    public IReadOnlyList<MapQualityDocument> Quality(int runId, string? method = null)
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

    /// <summary>The stored map for (run, epoch, method, target), or null.</summary>
    public MapDocument? FindMap(int runId, int epoch, string method, string target)
    {
        ArgumentNullException.ThrowIfNull(method);
        ArgumentNullException.ThrowIfNull(target);
        string key = MapKey(runId, epoch, method, target);
        return Guard(() => MapsCollection.FindOne(Query.EQ(nameof(MapDocument.Key), key)));
    }

    /// <summary>Every map stored for one epoch of a run (all methods and targets), complete or not.</summary>
    public IReadOnlyList<MapDocument> MapsAt(int runId, int epoch) =>
        Guard(() => MapsCollection.Find(m => m.RunId == runId && m.Epoch == epoch).OrderBy(m => m.Method, StringComparer.Ordinal).ToList());

    /// <summary>The distinct method names a run has maps under (configured and re-attributed), in ordinal order.</summary>
    public IReadOnlyList<string> MapMethods(int runId) =>
        Guard(() => MapsCollection.Query().Where(m => m.RunId == runId).Select(m => m.Method).ToList().Distinct().Order(StringComparer.Ordinal).ToList());

    /// <summary>Saves a weight snapshot and returns its file id.</summary>
    public string SaveSnapshot(int runId, int epoch, Stream weights)
    {
        ArgumentNullException.ThrowIfNull(weights);
        string id = $"snapshots/{runId}/{epoch:D6}";
        Guard(() => _database.FileStorage.Upload(id, $"run{runId}-epoch{epoch}.weights", weights));
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
    public IReadOnlyList<EpochDocument> Epochs(int runId) =>
        Guard(() => EpochsCollection.Find(e => e.RunId == runId).OrderBy(e => e.Epoch).ToList());

    /// <summary>The maps of a run's complete epochs, in epoch order; optionally one method only.</summary>
    public IReadOnlyList<MapDocument> Maps(int runId, string? method = null)
    {
        return Guard(() =>
        {
            var complete = EpochsCollection.Find(e => e.RunId == runId).Select(e => e.Epoch).ToHashSet();
            var maps = method is null
                ? MapsCollection.Find(m => m.RunId == runId)
                : MapsCollection.Find(m => m.RunId == runId && m.Method == method);
            return maps.Where(m => complete.Contains(m.Epoch)).OrderBy(m => m.Epoch).ThenBy(m => m.Method).ToList();
        });
    }

    /// <summary>The verdicts of a run's complete epochs, in epoch order.</summary>
    public IReadOnlyList<VerdictDocument> Verdicts(int runId)
    {
        return Guard(() =>
        {
            var complete = EpochsCollection.Find(e => e.RunId == runId).Select(e => e.Epoch).ToHashSet();
            return VerdictsCollection.Find(v => v.RunId == runId).Where(v => complete.Contains(v.Epoch)).OrderBy(v => v.Epoch).ToList();
        });
    }

    /// <inheritdoc />
    public void Dispose() => _database.Dispose();

    private static string EpochKey(int runId, int epoch) => $"{runId}/{epoch:D6}";

    private static string MapKey(int runId, int epoch, string method, string target) => $"{runId}/{epoch:D6}/{method}/{target}";

    // Key is unique: a resumed epoch replaces what an interrupted one wrote instead of duplicating it.
    private static void Upsert<T>(ILiteCollection<T> collection, T document)
        where T : class, IKeyedDocument
    {
        var existing = collection.FindOne(Query.EQ(nameof(IKeyedDocument.Key), document.Key));
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
            var connection = new ConnectionString
            {
                Filename = full,
                Connection = ConnectionType.Shared,
                ReadOnly = readOnly,
            };
            return new RunStore(new LiteDatabase(connection, Mapper), full);
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
        var header = new byte[32 + LiteDbSignature.Length];
        int read;
        using (var stream = new FileStream(full, FileMode.Open, FileAccess.Read, FileShare.ReadWrite | FileShare.Delete))
            read = stream.ReadAtLeast(header, header.Length, throwOnEndOfStream: false);
        if (read < header.Length || !header.AsSpan(32).SequenceEqual(LiteDbSignature))
            throw new StoreException($"'{full}' is not a DriftWatch store (not a LiteDB file); pass the .litedb file a monitored run wrote");
        if (info.Length < 8192)
            throw new StoreException($"store file '{full}' is truncated ({info.Length} bytes, less than one LiteDB header and data page)");
    }

    private void EnsureSchema()
    {
        Guard(() =>
        {
            var meta = _database.GetCollection(MetaCollection);
            var format = meta.FindById("format");
            if (format is null)
            {
                if (_database.GetCollectionNames().Any(n => n != MetaCollection && !n.StartsWith('$')))
                    throw new StoreException($"'{Path}' is a LiteDB file of another program, not a DriftWatch store; pass another --store");
                meta.Insert(new BsonDocument { ["_id"] = "format", ["version"] = FormatVersion });
            }
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
        });
    }

    private void CheckFormat()
    {
        Guard(() =>
        {
            var format = _database.GetCollection(MetaCollection).FindById("format");
            if (format is null)
                throw new StoreException($"'{Path}' is a LiteDB file but not a DriftWatch store (no format record); pass the file a monitored run wrote");
            int version = format["version"].AsInt32;
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
    }
}
