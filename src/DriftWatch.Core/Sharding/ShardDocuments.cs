using DriftWatch.Attribution;
using DriftWatch.Storage;

namespace DriftWatch.Sharding;

/// <summary>Builds, compares and prepares the shard record a re-attribution shard writes into its own store.</summary>
public static class ShardDocuments
{
    /// <summary>The job name of a re-attribution shard.</summary>
    public const string ReattributeJob = "reattribute";

    /// <summary>The shard record of <paramref name="shard"/> of a re-attribution of <paramref name="run"/>.</summary>
    internal static ShardDocument For(RunDocument run, ReattributionOptions request, Shard shard, IReadOnlyList<EpochDocument> jobEpochs, IReadOnlyList<EpochDocument> epochs, string sourceStore)
    {
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(request);
        ArgumentNullException.ThrowIfNull(jobEpochs);
        ArgumentNullException.ThrowIfNull(epochs);
        return new ShardDocument
        {
            Job = ReattributeJob,
            Index = shard.Index,
            Count = shard.Count,
            RunName = run.Name,
            ProbeHash = run.ProbeHash,
            Features = [.. run.Features],
            ModelFactory = run.ModelFactory,
            ModelSettings = new Dictionary<string, string>(run.ModelSettings, StringComparer.Ordinal),
            ModelShape = run.ModelShape,
            Target = run.Target,
            Baseline = run.Baseline,
            Method = request.Method.Name,
            Settings = new Dictionary<string, string>(request.Method.Settings, StringComparer.Ordinal),
            StoredName = request.Name,
            QualitySettings = request.Quality is null ? [] : new Dictionary<string, string>(request.Quality.ToSettings(), StringComparer.Ordinal),
            JobEpochs = [.. jobEpochs.Select(e => e.Epoch)],
            Epochs = [.. epochs.Select(e => e.Epoch)],
            SourceStore = sourceStore ?? "",
        };
    }

    /// <summary>
    /// Makes <paramref name="shardStore"/> ready for the shard, in one transaction: the shard record (not yet finished),
    /// a copy of the run (without weight snapshots) and its slice's epoch records, so the shard store can also be read
    /// on its own. Returns the run as the shard store holds it.
    /// </summary>
    internal static RunDocument Prepare(RunStore shardStore, ShardDocument record, RunDocument run, IReadOnlyList<EpochDocument> epochs)
    {
        ArgumentNullException.ThrowIfNull(shardStore);
        ArgumentNullException.ThrowIfNull(record);
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(epochs);
        RunDocument? copy = null;
        shardStore.InOneTransaction(() =>
        {
            shardStore.WriteShard(record with { Finished = false });
            copy = shardStore.FindRun(run.Name) ?? shardStore.AddRun(run);
            foreach (var epoch in epochs)
                shardStore.WriteEpoch(epoch with { Id = 0, RunId = copy.Id, SnapshotId = null });
        });
        return copy!;
    }

    /// <summary>How two shard records differ as parts of one job (the run, the method, the split), or null when they belong together.</summary>
    /// <remarks>The shard's own number, its epochs and its progress are not compared.</remarks>
    internal static string? Difference(ShardDocument a, ShardDocument b)
    {
        ArgumentNullException.ThrowIfNull(a);
        ArgumentNullException.ThrowIfNull(b);
        if (a.Job != b.Job)
            return $"it is a '{b.Job}' shard, not '{a.Job}'";
        if (a.RunName != b.RunName)
            return $"its run is '{b.RunName}', not '{a.RunName}'";
        string? run = RunDifference(a, b.RunName, b.ProbeHash, b.Features, b.ModelFactory, b.ModelSettings, b.ModelShape, b.Target, b.Baseline);
        if (run is not null)
            return run;
        if (a.Method != b.Method || !SameSettings(a.Settings, b.Settings))
            return $"its method is {Describe(b.Method, b.Settings)}, not {Describe(a.Method, a.Settings)}";
        if (a.StoredName != b.StoredName)
            return $"its maps are stored as '{b.StoredName}', not '{a.StoredName}'";
        if (!SameSettings(a.QualitySettings, b.QualitySettings))
            return a.QualitySettings.Count == 0 || b.QualitySettings.Count == 0
                ? "one measured quality figures (--quality) and the other did not"
                : "their quality figures were measured with other settings";
        if (a.Count != b.Count)
            return $"it is one of {b.Count} shards, not one of {a.Count}";
        if (!a.JobEpochs.SequenceEqual(b.JobEpochs))
            return $"it splits epochs {Shard.Describe(b.JobEpochs)}, not {Shard.Describe(a.JobEpochs)}";
        return null;
    }

    /// <summary>How a run differs from the one a shard was cut from (name, probe hash, schema, model settings, target, baseline), or null.</summary>
    internal static string? RunDifference(ShardDocument shard, RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(shard);
        ArgumentNullException.ThrowIfNull(run);
        if (shard.RunName != run.Name)
            return $"the run is '{run.Name}', not '{shard.RunName}'";
        return RunDifference(shard, run.Name, run.ProbeHash, run.Features, run.ModelFactory, run.ModelSettings, run.ModelShape, run.Target, run.Baseline);
    }

    private static string? RunDifference(
        ShardDocument a, string name, string probeHash, List<FeatureDocument> features, string modelFactory, Dictionary<string, string> modelSettings,
        string modelShape, string target, string baseline)
    {
        if (a.ProbeHash != probeHash)
            return $"run '{name}' has another probe set (hash {Short(probeHash)}, not {Short(a.ProbeHash)})";
        if (!a.Features.SequenceEqual(features))
            return $"run '{name}' has another feature schema ({features.Count} features, not {a.Features.Count})";
        if (a.ModelFactory != modelFactory || !SameSettings(a.ModelSettings, modelSettings) || a.ModelShape != modelShape)
            return $"run '{name}' has other model settings ({Describe(modelFactory, modelSettings)}, not {Describe(a.ModelFactory, a.ModelSettings)})";
        if (a.Target != target || a.Baseline != baseline)
            return $"run '{name}' attributes target '{target}' from baseline '{baseline}', not '{a.Target}' from '{a.Baseline}'";
        return null;
    }

    private static bool SameSettings(IReadOnlyDictionary<string, string> a, IReadOnlyDictionary<string, string> b) =>
        a.Count == b.Count && a.All(s => b.TryGetValue(s.Key, out var v) && v == s.Value);

    private static string Describe(string name, IReadOnlyDictionary<string, string> settings) =>
        (name.Length == 0 ? "(none)" : name.Split(',')[0])
        + "(" + string.Join(", ", settings.OrderBy(s => s.Key, StringComparer.Ordinal).Select(s => s.Key + "=" + s.Value)) + ")";

    private static string Short(string hash) => hash.Length > 12 ? hash[..12] + "…" : hash;
}
