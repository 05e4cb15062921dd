using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Storage;

namespace DriftWatch.Detection;

/// <summary>Replays a stored run through the detector, so a policy can be judged the morning after or a resumed monitor can catch up.</summary>
public static class RunReview
{
    /// <summary>The name of the method whose maps the detector reads: the run's first configured method.</summary>
    internal static string PrimaryMethod(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        return run.Methods.Count > 0 ? run.Methods[0].Name : "integrated-gradients";
    }

    /// <summary>An attribution map read back from its stored document.</summary>
    internal static AttributionMap ToMap(MapDocument document)
    {
        ArgumentNullException.ThrowIfNull(document);
        return new AttributionMap(
            document.Rows,
            document.Features,
            FloatBytes.ToFloats(document.Scores),
            document.Deltas is null ? null : FloatBytes.ToFloats(document.Deltas),
            document.OutputGaps is null ? null : FloatBytes.ToFloats(document.OutputGaps));
    }

    /// <summary>What the detector reads for a stored epoch: metrics, the primary map and the monitor's recorded problems.</summary>
    internal static EpochInput Input(EpochDocument epoch, MapDocument? map)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        var failures = epoch.Problems
            .Select(p => Rules.MonitoringFailureRule.Failure(epoch.Epoch, p))
            .ToImmutableArray();
        return new EpochInput(epoch.Epoch, epoch.Metrics, map is null ? null : ToMap(map), failures);
    }

    /// <summary>Replays every complete epoch of <paramref name="run"/> in order under <paramref name="policy"/>.</summary>
    internal static IReadOnlyList<Assessment> Replay(RunStore store, RunDocument run, GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(policy);
        var methods = ConfiguredMethods(run);
        var detector = new CrossMethodDetector(RunContext.FromRun(run), policy, methods);
        // The epoch list first: an epoch document is written last, so every epoch listed has its maps by then.
        var epochs = store.Epochs(run.Id);
        var maps = MapsByEpoch(store, run.Id, methods);
        return epochs
            .Select(e => Observe(detector, e, maps.GetValueOrDefault(e.Epoch)))
            .ToList();
    }

    /// <summary>The run's configured methods' names, the primary first.</summary>
    internal static IReadOnlyList<string> ConfiguredMethods(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        return run.Methods.Count > 0 ? run.Methods.Select(m => m.Name).ToList() : [PrimaryMethod(run)];
    }

    /// <summary>The stored maps of the given methods, by epoch and then by method.</summary>
    internal static Dictionary<int, Dictionary<string, MapDocument>> MapsByEpoch(RunStore store, int runId, IReadOnlyList<string> methods)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(methods);
        var result = new Dictionary<int, Dictionary<string, MapDocument>>();
        foreach (string method in methods)
        {
            foreach (var map in store.Maps(runId, method))
            {
                if (!result.TryGetValue(map.Epoch, out var byMethod))
                    result[map.Epoch] = byMethod = new Dictionary<string, MapDocument>(StringComparer.Ordinal);
                byMethod.TryAdd(method, map);
            }
        }
        return result;
    }

    /// <summary>Feeds one stored epoch, with its stored maps by method (or null), to a cross-method detector.</summary>
    internal static Assessment Observe(CrossMethodDetector detector, EpochDocument epoch, IReadOnlyDictionary<string, MapDocument>? maps)
    {
        ArgumentNullException.ThrowIfNull(detector);
        ArgumentNullException.ThrowIfNull(epoch);
        var read = maps?.ToDictionary(kv => kv.Key, kv => ToMap(kv.Value), StringComparer.Ordinal) ?? new Dictionary<string, AttributionMap>(StringComparer.Ordinal);
        var input = Input(epoch, null) with { Map = read.GetValueOrDefault(detector.PrimaryMethod) };
        return detector.Observe(input, read);
    }
}
