using System.Collections.Immutable;
using DriftWatch.Detection;
using DriftWatch.Storage;

namespace DriftWatch.Charts;

/// <summary>One complete epoch of a run as charts and tables read it.</summary>
/// <param name="Epoch">The epoch number.</param>
/// <param name="TrainLoss">The training loss, or null when the loop did not report one.</param>
/// <param name="ValidationLoss">The validation loss, or null when the loop did not report one.</param>
/// <param name="HeldOutShare">Per feature, its share of mean |attribution| on the held-out half; empty when the epoch was not attributed with the history's method.</param>
/// <param name="TrainingShare">Per feature, its share of mean |attribution| on the training half; empty like <paramref name="HeldOutShare"/>.</param>
/// <param name="Verdict">The gate's verdict at this epoch, or null when none was stored.</param>
/// <param name="Reasons">The verdict's findings, one line each, led by the severity each one asks for (e.g. <c>Caution: …</c>).</param>
/// <param name="Problems">Problems the monitor met at this epoch (training went on).</param>
public sealed record EpochRecord(
    int Epoch,
    double? TrainLoss,
    double? ValidationLoss,
    ImmutableArray<double> HeldOutShare,
    ImmutableArray<double> TrainingShare,
    VerdictKind? Verdict,
    ImmutableArray<string> Reasons,
    ImmutableArray<string> Problems)
{
    /// <summary>Whether this epoch has an attribution map for the history's method.</summary>
    public bool IsAttributed => !HeldOutShare.IsDefaultOrEmpty;

    /// <summary>The indexes of the <paramref name="count"/> features with the largest held-out share, largest first; empty when not attributed.</summary>
    /// <remarks>Non-finite shares rank last; ties keep schema order.</remarks>
    public ImmutableArray<int> TopByHeldOutShare(int count)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(count);
        if (!IsAttributed)
            return [];
        var share = HeldOutShare;
        return Enumerable.Range(0, share.Length)
            .OrderByDescending(f => double.IsFinite(share[f]) ? share[f] : double.NegativeInfinity)
            .ThenBy(f => f)
            .Take(count)
            .ToImmutableArray();
    }
}

/// <summary>
/// What a store holds about one run, read once for charts and tables: its complete epochs with losses,
/// per-half importance shares of one attribution method, and verdicts.
/// </summary>
public sealed class RunHistory
{
    /// <summary>The method read when none is named: Integrated Gradients.</summary>
    public const string DefaultMethod = "integrated-gradients";

    private RunHistory(RunDocument run, string method, ImmutableArray<string> features, ImmutableArray<EpochRecord> epochs)
    {
        RunName = run.Name;
        CreatedUtc = run.CreatedUtc;
        Description = run.Description;
        ProbeHash = run.ProbeHash;
        HeldOutRows = run.HeldOutRows;
        TrainingRows = run.TrainingRows;
        Target = run.Target;
        Baseline = run.Baseline;
        Methods = run.Methods.Select(m => m.Name).ToImmutableArray();
        Method = method;
        FeatureNames = features;
        Epochs = epochs;
    }

    /// <summary>The run's name as stored (render it through <see cref="DisplayText.Clean"/>).</summary>
    public string RunName { get; }

    /// <summary>When the run was registered (UTC).</summary>
    public DateTime CreatedUtc { get; }

    /// <summary>The run's free-text description.</summary>
    public string Description { get; }

    /// <summary>The probe set's content hash.</summary>
    public string ProbeHash { get; }

    /// <summary>Rows in the probe set's held-out half.</summary>
    public int HeldOutRows { get; }

    /// <summary>Rows in the probe set's training half.</summary>
    public int TrainingRows { get; }

    /// <summary>The attributed output, e.g. <c>logit</c>.</summary>
    public string Target { get; }

    /// <summary>The attribution baseline, e.g. <c>zero</c>.</summary>
    public string Baseline { get; }

    /// <summary>Every attribution method the run was configured with.</summary>
    public ImmutableArray<string> Methods { get; }

    /// <summary>The method whose maps were read.</summary>
    public string Method { get; }

    /// <summary>Feature names in schema order (render through <see cref="DisplayText.Clean"/>).</summary>
    public ImmutableArray<string> FeatureNames { get; }

    /// <summary>The complete epochs, in epoch order.</summary>
    public ImmutableArray<EpochRecord> Epochs { get; }

    /// <summary>The last epoch that has an attribution map for <see cref="Method"/>, or null.</summary>
    public EpochRecord? LastAttributed => Epochs.LastOrDefault(e => e.IsAttributed);

    /// <summary>Reads a run's history from the store.</summary>
    /// <param name="store">An open store.</param>
    /// <param name="runName">The run's name.</param>
    /// <param name="method">The attribution method whose maps to read. Default: <see cref="DefaultMethod"/>.</param>
    /// <exception cref="StoreException">No such run (the message lists the runs there are), or stored data that does not fit together.</exception>
    /// <exception cref="DriftWatchException">The run was not attributed with <paramref name="method"/>.</exception>
    public static RunHistory Load(RunStore store, string runName, string method = DefaultMethod)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(runName);
        ArgumentNullException.ThrowIfNull(method);
        var run = store.GetRun(runName);
        // Re-attributed maps are stored under their own method names beside the configured methods' maps.
        var reattributed = run.Methods.Any(m => m.Name == method) ? [] : store.MapMethods(run.Id).Where(m => !run.Methods.Any(c => c.Name == m)).ToList();
        if (!run.Methods.Any(m => m.Name == method) && !reattributed.Contains(method))
        {
            string known = run.Methods.Count == 0
                ? "it records no methods"
                : "its methods: " + string.Join(", ", run.Methods.Select(m => m.Name));
            if (reattributed.Count > 0)
                known += "; re-attributed: " + string.Join(", ", reattributed);
            throw new DriftWatchException($"run '{DisplayText.Clean(run.Name)}' was not attributed with method '{DisplayText.Clean(method)}'; {known}");
        }

        var features = run.Features.Select(f => f.Name).ToImmutableArray();
        var maps = new Dictionary<int, MapDocument>();
        foreach (var map in store.Maps(run.Id, method))
        {
            // One target per run today; should a run hold several, the first stored one is read.
            if (maps.ContainsKey(map.Epoch))
                continue;
            CheckWidth(store, run, map.Epoch, "held-out", map.HeldOut.Share, features.Length);
            CheckWidth(store, run, map.Epoch, "training", map.Training.Share, features.Length);
            maps[map.Epoch] = map;
        }
        var verdicts = store.Verdicts(run.Id).ToDictionary(v => v.Epoch);

        var epochs = store.Epochs(run.Id).Select(e =>
        {
            maps.TryGetValue(e.Epoch, out var map);
            verdicts.TryGetValue(e.Epoch, out var verdict);
            return new EpochRecord(
                e.Epoch,
                Metric(e, "train_loss"),
                Metric(e, "validation_loss"),
                map is null ? [] : [.. map.HeldOut.Share],
                map is null ? [] : [.. map.Training.Share],
                verdict is null ? null : ParseVerdict(store, run, verdict),
                verdict is null ? [] : Reasons(verdict),
                [.. e.Problems]);
        }).ToImmutableArray();
        return new RunHistory(run, method, features, epochs);
    }

    // Each finding carries its own severity: a Caution beside a Halt must not read as a Halt.
    private static ImmutableArray<string> Reasons(VerdictDocument verdict) =>
        verdict.Findings.Count > 0
            ? [.. verdict.Findings.Select(f => $"{f.Severity}: {f.Evidence}")]
            : [.. verdict.Reasons.Select(r => $"{verdict.Kind}: {r}")];

    private static double? Metric(EpochDocument epoch, string key) =>
        epoch.Metrics.TryGetValue(key, out double value) ? value : null;

    private static VerdictKind ParseVerdict(RunStore store, RunDocument run, VerdictDocument verdict) =>
        Enum.TryParse<VerdictKind>(verdict.Kind, ignoreCase: false, out var kind) && Enum.IsDefined(kind)
            ? kind
            : throw new StoreException($"store '{store.Path}': verdict of run '{DisplayText.Clean(run.Name)}' at epoch {verdict.Epoch} has unknown kind '{DisplayText.Clean(verdict.Kind)}'; expected Continue, Caution or Halt");

    private static void CheckWidth(RunStore store, RunDocument run, int epoch, string half, double[] share, int features)
    {
        if (share.Length != features)
        {
            throw new StoreException(
                $"store '{store.Path}': map of run '{DisplayText.Clean(run.Name)}' at epoch {epoch} has {share.Length} {half} shares but the run has {features} features; the store is damaged");
        }
    }
}
