using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Storage;

namespace DriftWatch.Detection;

/// <summary>Replays a stored run through the detector, so a policy can be judged the morning after or a resumed monitor can catch up.</summary>
public static class RunReview
{
    /// <summary>The name of the method whose maps the detector reads: the run's first configured method.</summary>
    public static string PrimaryMethod(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        return run.Methods.Count > 0 ? run.Methods[0].Name : "integrated-gradients";
    }

    /// <summary>An attribution map read back from its stored document.</summary>
    public static AttributionMap ToMap(MapDocument document)
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
    public static EpochEvidence Evidence(EpochDocument epoch, MapDocument? map)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        var failures = epoch.Problems
            .Select(p => new Finding(FindingKind.MonitoringFailure, VerdictKind.Caution, "", 0, 0, [epoch.Epoch, epoch.Epoch], p))
            .ToImmutableArray();
        return new EpochEvidence(epoch.Epoch, epoch.Metrics, map is null ? null : ToMap(map), failures);
    }

    /// <summary>Replays every complete epoch of <paramref name="run"/> in order under <paramref name="policy"/>.</summary>
    public static IReadOnlyList<Assessment> Replay(RunStore store, RunDocument run, GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(policy);
        var detector = new DivergenceDetector(RunContext.FromRun(run), policy);
        var maps = store.Maps(run.Id, PrimaryMethod(run)).ToDictionary(m => m.Epoch);
        return store.Epochs(run.Id)
            .Select(e => detector.Observe(Evidence(e, maps.GetValueOrDefault(e.Epoch))))
            .ToList();
    }
}
