using DriftWatch.Attribution;
using DriftWatch.Model;
using DriftWatch.Storage;

namespace DriftWatch.Sharding;

/// <summary>A shard of the split that no given shard store holds, and the epochs it covers.</summary>
/// <param name="Shard">The shard.</param>
/// <param name="Epochs">Its epochs.</param>
public sealed record MissingShard(Shard Shard, IReadOnlyList<int> Epochs);

/// <summary>A given shard store that lacks maps for some of its epochs (its task stopped early), and those epochs.</summary>
/// <param name="Path">The shard store.</param>
/// <param name="Shard">The shard it holds.</param>
/// <param name="Epochs">Its epochs that have a map neither in it nor in the target.</param>
public sealed record IncompleteShard(string Path, Shard Shard, IReadOnlyList<int> Epochs);

/// <summary>What a merge will do, worked out from read-only stores before anything is written.</summary>
/// <param name="Job">The job's shard record (that of the first shard store).</param>
/// <param name="TargetRun">The run in the target store.</param>
/// <param name="Maps">Maps (with their quality records) to add to the target, in epoch order.</param>
/// <param name="AlreadyInTarget">Epochs whose map under the stored name the target already has; left as they were.</param>
/// <param name="MissingShards">Shards of the split that no given store holds.</param>
/// <param name="IncompleteShards">Given shard stores that lack some of their epochs.</param>
/// <param name="NoSnapshot">Epochs without a weight snapshot, so no shard could compute them.</param>
internal sealed record MergePlan(
    ShardDocument Job,
    RunDocument TargetRun,
    IReadOnlyList<(MapDocument Map, MapQualityDocument? Quality)> Maps,
    IReadOnlyList<int> AlreadyInTarget,
    IReadOnlyList<MissingShard> MissingShards,
    IReadOnlyList<IncompleteShard> IncompleteShards,
    IReadOnlyList<int> NoSnapshot)
{
    /// <summary>Whether every epoch of the job has its map once the plan is applied (epochs without a snapshot aside).</summary>
    public bool Complete => MissingShards.Count == 0 && IncompleteShards.Count == 0;
}

/// <summary>
/// Joins the shard stores of one split re-attribution into the run's store: checks that every shard belongs to the same
/// run and method as the target, adds the maps the target lacks in one transaction, and reports what is missing.
/// </summary>
/// <remarks>
/// Shard stores are only read. A map the target already has under the stored name is left as it was, so merging
/// again, or merging a shard twice, changes nothing. Maps are added in epoch order whatever order the shards come in.
/// </remarks>
public static class ShardMerge
{
    /// <summary>Checks the shards against each other and the target and works out what to add; writes nothing.</summary>
    /// <param name="shards">The shard stores, opened for reading.</param>
    /// <param name="target">The run's store, opened for reading.</param>
    /// <exception cref="DriftWatchException">A store that is not a shard store, shards of different jobs, or a target without the same run.</exception>
    internal static MergePlan Plan(IReadOnlyList<RunStore> shards, RunStore target)
    {
        ArgumentNullException.ThrowIfNull(shards);
        ArgumentNullException.ThrowIfNull(target);
        if (shards.Count == 0)
            throw new DriftWatchException("merge needs at least one shard store");
        var records = new List<ShardDocument>();
        foreach (var store in shards)
        {
            var record = store.FindShard()
                ?? throw new DriftWatchException($"'{store.Path}' is not a shard store (it has no shard record); merge takes the files 'reattribute --shard K/N' writes");
            if (records.Count > 0 && ShardDocuments.Difference(records[0], record) is { } difference)
                throw new DriftWatchException($"shard store '{store.Path}' does not belong with '{shards[0].Path}': {difference}; merge the shards of one re-attribution only");
            records.Add(record);
        }
        var job = records[0];
        if (target.FindShard() is not null)
            throw new DriftWatchException($"the target '{target.Path}' is itself a shard store; --into names the store the shards were cut from (the one reattribute read)");
        var run = target.FindRun(job.RunName)
            ?? throw new DriftWatchException($"the target store '{target.Path}' has no run named '{job.RunName}'; --into names the store the shards were cut from (the one reattribute read)");
        if (ShardDocuments.RunDifference(job, run) is { } runDifference)
            throw new DriftWatchException($"the shards were cut from another run than the target's: {runDifference}; --into names the store the shards were cut from");
        var targetEpochs = target.Epochs(run.Id).Select(e => e.Epoch).ToHashSet();
        var absent = job.JobEpochs.Where(e => !targetEpochs.Contains(e)).ToList();
        if (absent.Count > 0)
            throw new DriftWatchException($"run '{run.Name}' in '{target.Path}' has no epochs {Shard.Describe(absent)}, which the shards cover; --into names the store the shards were cut from");
        Reattribution.CheckStoredName(target, run, job.StoredName, job.Method, job.Settings);

        string label = AttributionTarget.Parse(run.Target).Label;
        var inTarget = job.JobEpochs.Where(e => target.FindMap(run.Id, e, job.StoredName, label) is not null).ToHashSet();
        var found = new SortedDictionary<int, (MapDocument, MapQualityDocument?)>();
        var noSnapshot = new SortedSet<int>();
        var perShard = new List<(string Path, ShardDocument Record, HashSet<int> Present)>();
        for (int i = 0; i < shards.Count; i++)
        {
            var store = shards[i];
            var record = records[i];
            var present = new HashSet<int>();
            var shardRun = store.FindRun(job.RunName);
            if (shardRun is not null)
            {
                var slice = record.Epochs.ToHashSet();
                var quality = store.Quality(shardRun.Id, job.StoredName).Where(q => q.Target == label).ToDictionary(q => q.Epoch);
                foreach (var map in store.Maps(shardRun.Id, job.StoredName).Where(m => m.Target == label && slice.Contains(m.Epoch)))
                {
                    present.Add(map.Epoch);
                    if (!inTarget.Contains(map.Epoch))
                        found.TryAdd(map.Epoch, (map with { Id = 0, RunId = run.Id }, quality.TryGetValue(map.Epoch, out var q) ? q with { Id = 0, RunId = run.Id } : null));
                }
            }
            noSnapshot.UnionWith(record.NoSnapshot);
            perShard.Add((store.Path, record, present));
        }

        bool Has(int epoch) => inTarget.Contains(epoch) || found.ContainsKey(epoch) || noSnapshot.Contains(epoch);
        var given = records.Select(r => r.Index).ToHashSet();
        var missingShards = Enumerable.Range(0, job.Count)
            .Where(k => !given.Contains(k))
            .Select(k => new Shard(k, job.Count))
            .Select(s => new MissingShard(s, s.Slice(job.JobEpochs)))
            .Where(m => m.Epochs.Any(e => !Has(e)))
            .ToList();
        var incomplete = perShard
            .Select(s => new IncompleteShard(s.Path, new Shard(s.Record.Index, s.Record.Count), [.. s.Record.Epochs.Where(e => !Has(e))]))
            .Where(s => s.Epochs.Count > 0)
            .ToList();
        return new MergePlan(
            job,
            run,
            [.. found.Values],
            [.. inTarget.Order()],
            missingShards,
            incomplete,
            [.. noSnapshot.Where(e => !inTarget.Contains(e))]);
    }

    /// <summary>Adds the plan's maps to the target in one transaction; does not open anything when there is nothing to add.</summary>
    /// <param name="target">The run's store, opened for writing.</param>
    /// <param name="plan">The plan <see cref="Plan"/> made from the same stores.</param>
    internal static void Apply(RunStore target, MergePlan plan)
    {
        ArgumentNullException.ThrowIfNull(target);
        ArgumentNullException.ThrowIfNull(plan);
        if (plan.Maps.Count == 0)
            return;
        target.InOneTransaction(() =>
        {
            foreach (var (map, quality) in plan.Maps)
            {
                // Maps that were written while the plan was made by another merge are left as they are.
                if (target.FindMap(map.RunId, map.Epoch, map.Method, map.Target) is not null)
                    continue;
                target.WriteMap(map);
                if (quality is not null)
                    target.WriteQuality(quality);
            }
        });
    }
}
