using System.Globalization;
using LiteDB;

namespace DriftWatch.Storage;

/// <summary>
/// The whole-store check behind <see cref="RunStore.Verify"/>: damage that every reader would otherwise take for a
/// healthy store — a collection gone, an epoch without its verdict or statistics, a part whose run id or key was changed.
/// </summary>
/// <remarks>
/// <see cref="RunStore.Verify"/> runs it inside one read transaction. Were it not, the order would still hold: the
/// epoch list first, then the parts, then the runs last; an epoch's parts are committed with it, and a run is
/// registered before any of its epochs, so nothing a listed epoch needs can be missed by a writer committing between reads.
/// </remarks>
internal static class StoreAudit
{
    /// <summary>The collections every store holds once a writer opened it (their indexes are made on open).</summary>
    private static readonly string[] Required = ["runs", "epochs", "maps", "verdicts", "statistics"];

    public static List<string> Problems(LiteDatabase database)
    {
        var problems = new List<string>();
        var collections = database.GetCollectionNames().ToHashSet(StringComparer.Ordinal);
        var epochs = database.GetCollection("epochs").FindAll().ToList();
        var verdictKeys = Keys(database, "verdicts", problems);
        var statisticsKeys = Keys(database, "statistics", problems);
        var mapParts = Parts(database, "maps");
        var layerParts = Parts(database, "layers");
        var runs = database.GetCollection("runs").FindAll().ToList();

        if (runs.Count > 0 || epochs.Count > 0)
        {
            foreach (string name in Required.Where(n => !collections.Contains(n)))
                problems.Add($"collection '{name}' is missing; every store a monitor writes has one, so it was removed or the file was damaged");
        }
        var runIds = new Dictionary<int, string>();
        foreach (var run in runs)
        {
            if (!run["_id"].IsInt32)
            {
                problems.Add($"a run record has no valid id ({Shown(run["_id"])})");
                continue;
            }
            string name = run["Name"].IsString ? run["Name"].AsString : $"#{run["_id"].AsInt32}";
            runIds[run["_id"].AsInt32] = name;
            if (run["WatchedLayers"].IsArray && run["WatchedLayers"].AsArray.Count > 0 && !collections.Contains("layers"))
                problems.Add($"run '{name}' watches layers but collection 'layers' is missing; it was removed or the file was damaged");
        }

        foreach (var epoch in epochs)
        {
            if (!epoch["RunId"].IsInt32 || !epoch["Epoch"].IsInt32)
            {
                problems.Add($"epoch record {Shown(epoch["Key"])} has no valid run id or epoch number");
                continue;
            }
            int runId = epoch["RunId"].AsInt32;
            int number = epoch["Epoch"].AsInt32;
            string key = EpochKey(runId, number);
            string where = runIds.TryGetValue(runId, out string? runName)
                ? $"epoch {number.ToString(CultureInfo.InvariantCulture)} of run '{runName}'"
                : $"epoch {number.ToString(CultureInfo.InvariantCulture)} of run id {runId.ToString(CultureInfo.InvariantCulture)}";
            if (runName is null)
                problems.Add($"{where} belongs to no run in the store (its run id was changed or its run removed)");
            if (!epoch["Key"].IsString || epoch["Key"].AsString != key)
                problems.Add($"{where} has key {Shown(epoch["Key"])}, not '{key}' (its run id or epoch number was changed)");
            if (collections.Contains("verdicts") && !verdictKeys.Contains(key))
                problems.Add($"{where} has no verdict; the monitor stores one with every epoch");
            if (collections.Contains("statistics") && !statisticsKeys.Contains(key))
                problems.Add($"{where} has no detector statistics; the monitor stores them with every epoch");
        }

        foreach (var (collection, parts) in new[] { ("maps", mapParts), ("layers", layerParts) })
        {
            foreach (var (runId, epoch, key) in parts)
            {
                if (!runIds.ContainsKey(runId))
                    problems.Add($"a {collection[..^1]} record of epoch {epoch.ToString(CultureInfo.InvariantCulture)} names run id {runId.ToString(CultureInfo.InvariantCulture)}, which is not in the store (its run id was changed or its run removed)");
                else if (!key.StartsWith(EpochKey(runId, epoch) + "/", StringComparison.Ordinal))
                    problems.Add($"a {collection[..^1]} record has key '{key}', which does not start with '{EpochKey(runId, epoch)}/' (its run id or epoch number was changed)");
            }
        }
        return problems;
    }

    private static string EpochKey(int runId, int epoch) => string.Create(CultureInfo.InvariantCulture, $"{runId}/{epoch:D6}");

    // The keys of a per-epoch collection, each checked against its run id and epoch number.
    private static HashSet<string> Keys(LiteDatabase database, string collection, List<string> problems)
    {
        var keys = new HashSet<string>(StringComparer.Ordinal);
        foreach (var (runId, epoch, key) in Parts(database, collection))
        {
            keys.Add(key);
            if (key != EpochKey(runId, epoch))
                problems.Add($"a {collection} record has key '{key}', not '{EpochKey(runId, epoch)}' (its run id or epoch number was changed)");
        }
        return keys;
    }

    // Run id, epoch and key of every record of a collection, without the record's arrays.
    private static List<(int RunId, int Epoch, string Key)> Parts(LiteDatabase database, string collection) =>
        [.. database.GetCollection(collection).Query()
            .Select(BsonExpression.Create("{ r: $.RunId, e: $.Epoch, k: $.Key }"))
            .ToEnumerable()
            .Select(d => (d["r"].IsInt32 ? d["r"].AsInt32 : -1, d["e"].IsInt32 ? d["e"].AsInt32 : -1, d["k"].IsString ? d["k"].AsString : ""))];

    private static string Shown(BsonValue value) => value.IsNull ? "null" : value.IsString ? $"'{value.AsString}'" : value.ToString();
}
