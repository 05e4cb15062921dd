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
    /// <summary>Per feature, its mean |attribution| on the held-out half (the importance); empty when not attributed.</summary>
    public ImmutableArray<double> HeldOutMeanAbsolute { get; init; } = [];

    /// <summary>Per feature, its mean |attribution| on the training half; empty when not attributed.</summary>
    public ImmutableArray<double> TrainingMeanAbsolute { get; init; } = [];

    /// <summary>Per feature, its mean signed attribution on the held-out half; empty when not attributed.</summary>
    public ImmutableArray<double> HeldOutMeanSigned { get; init; } = [];

    /// <summary>Per feature, its mean signed attribution on the training half; empty when not attributed.</summary>
    public ImmutableArray<double> TrainingMeanSigned { get; init; } = [];

    /// <summary>Per feature, its label alignment on the held-out half; empty without binary labels or when not attributed.</summary>
    public ImmutableArray<double> HeldOutAlignment { get; init; } = [];

    /// <summary>Per feature, its label alignment on the training half; empty like <see cref="HeldOutAlignment"/>.</summary>
    public ImmutableArray<double> TrainingAlignment { get; init; } = [];

    /// <summary>The detector's statistics (noise floors, drift score) of this epoch, or null when none were stored or the history's method is not the one the detector reads.</summary>
    public EpochStatistics? Statistics { get; init; }

    /// <summary>The findings behind this epoch's verdict; empty when there is none.</summary>
    public ImmutableArray<Finding> Findings { get; init; } = [];

    /// <summary>Whether this epoch has an attribution map for the history's method.</summary>
    public bool IsAttributed => !HeldOutShare.IsDefaultOrEmpty;

    /// <summary>The indexes of the <paramref name="count"/> features with the largest held-out share, largest first; empty when not attributed.</summary>
    /// <remarks>Non-finite shares rank last; ties keep schema order.</remarks>
    public ImmutableArray<int> TopByHeldOutShare(int count)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(count);
        if (!IsAttributed)
            return [];
        return ByShare(HeldOutShare).Take(count).ToImmutableArray();
    }

    // Feature indexes by share, largest first; non-finite shares last, ties in schema order.
    internal static IEnumerable<int> ByShare(IReadOnlyList<double> share) =>
        Enumerable.Range(0, share.Count)
            .OrderByDescending(f => double.IsFinite(share[f]) ? share[f] : double.NegativeInfinity)
            .ThenBy(f => f);
}

/// <summary>
/// What a store holds about one run, read once for charts and tables: its complete epochs with losses,
/// per-half importance shares of one attribution method, and verdicts.
/// </summary>
public sealed class RunHistory
{
    /// <summary>The method read when none is named: Integrated Gradients.</summary>
    public const string DefaultMethod = "integrated-gradients";

    private readonly RunDocument _run;

    private RunHistory(RunDocument run, string method, ImmutableArray<string> features, ImmutableArray<EpochRecord> epochs, ImmutableArray<FeatureRows> rows)
    {
        _run = run;
        PrimaryMethod = RunReview.PrimaryMethod(run);
        MethodSettingsReader = run.Methods.Select(m => new KeyValuePair<string, ImmutableSortedDictionary<string, string>>(
            m.Name, m.Settings.ToImmutableSortedDictionary(StringComparer.Ordinal))).ToImmutableArray();
        Policy = run.Policy;
        FeatureKinds = run.Features.Select(f => f.Kind).ToImmutableArray();
        Rows = rows;
        RunName = run.Name;
        CreatedUtc = run.CreatedUtc;
        Description = run.Description;
        ProbeHash = run.ProbeHash;
        HeldOutRows = run.HeldOutRows;
        TrainingRows = run.TrainingRows;
        Target = run.Target;
        NotChecked = RunContext.FromRun(run).NotChecked;
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

    /// <summary>
    /// The one line saying which label rules cannot run for the run's labels and target, and why (<c>not checked: …</c>;
    /// see <see cref="RunContext.NotChecked"/>), or null when they all can.
    /// </summary>
    public string? NotChecked { get; }

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

    /// <summary>The method the detector reads (the run's first); statistics and noise floors belong to it.</summary>
    public string PrimaryMethod { get; }

    /// <summary>Every configured method with its settings, in configuration order.</summary>
    public ImmutableArray<KeyValuePair<string, ImmutableSortedDictionary<string, string>>> MethodSettingsReader { get; }

    /// <summary>The gate policy the monitor used, as stored JSON (empty when none was stored).</summary>
    public string Policy { get; }

    /// <summary>Per feature, <c>Dense</c> or <c>Categorical</c>, in schema order.</summary>
    public ImmutableArray<string> FeatureKinds { get; }

    /// <summary>
    /// Per probe row (held-out rows first), the direction its label points a score (+1 positive class, −1 negative), as
    /// the label rules read it; null when the labels are not binary or were not stored.
    /// </summary>
    internal double[]? AlignmentSigns => _run.ProbeLabels is { } labels ? Probing.LabelKinds.AlignmentSigns(FloatBytes.ToFloats(labels)) : null;

    /// <summary>Per-row attributions of the features asked for when loading (see <see cref="Load"/>), in the order asked.</summary>
    public ImmutableArray<FeatureRows> Rows { get; }

    /// <summary>This history with the per-row attributions of <paramref name="features"/> read from <paramref name="store"/> (replacing any kept before).</summary>
    /// <exception cref="DriftWatchException">A feature is not in the run.</exception>
    public RunHistory WithRows(RunStore store, IReadOnlyCollection<string> features)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(features);
        var indexes = FeatureIndexes(_run, FeatureNames, features);
        // The epochs this history holds, not those committed since it was read.
        var (_, columns) = FirstMapPerEpoch(store, _run, Method, FeatureNames.Length, indexes, [.. Epochs.Select(e => e.Epoch)]);
        return new RunHistory(_run, Method, FeatureNames, Epochs, [.. indexes.Select((f, i) => RowsOf(columns, i, f, FeatureNames[f]))]);
    }

    /// <summary>The index of the feature called <paramref name="name"/>, or −1.</summary>
    public int FeatureIndex(string name)
    {
        ArgumentNullException.ThrowIfNull(name);
        return FeatureNames.IndexOf(name, StringComparer.Ordinal);
    }

    /// <summary>The last epoch that has an attribution map for <see cref="Method"/>, or null.</summary>
    public EpochRecord? LastAttributed => Epochs.LastOrDefault(e => e.IsAttributed);

    /// <summary>Reads a run's history from the store.</summary>
    /// <param name="store">An open store.</param>
    /// <param name="runName">The run's name.</param>
    /// <param name="method">The attribution method whose maps to read. Default: <see cref="DefaultMethod"/>.</param>
    /// <param name="rowsOf">Features whose per-row attributions to keep (for the feature detail chart); default none, which keeps memory small on long runs.</param>
    /// <param name="rowsOfFlagged">
    /// Also keep the per-row attributions of every feature a finding names, after those in <paramref name="rowsOf"/>:
    /// the feature detail chart's default choice, read in the same pass over the maps instead of a second one. Default false.
    /// </param>
    /// <exception cref="StoreException">No such run (the message lists the runs there are), or stored data that does not fit together.</exception>
    /// <exception cref="DriftWatchException">The run was not attributed with <paramref name="method"/>, or a feature in <paramref name="rowsOf"/> is not in the run.</exception>
    public static RunHistory Load(RunStore store, string runName, string method = DefaultMethod, IReadOnlyCollection<string>? rowsOf = null, bool rowsOfFlagged = false) =>
        Read(store, runName, method, rowsOf, rowsOfFlagged, betweenReads: null);

    // betweenReads runs after the first of the store reads: a test commits a writer's epoch there, deterministically.
    internal static RunHistory Read(RunStore store, string runName, string method, IReadOnlyCollection<string>? rowsOf, bool rowsOfFlagged, Action? betweenReads)
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
        // The epoch list first: an epoch's document is written last in its transaction (the commit marker), so every part
        // of an epoch listed here is stored before the reads below. Parts of epochs a writer commits meanwhile are left out.
        var stored = store.Epochs(run.Id);
        betweenReads?.Invoke();
        var complete = stored.Select(e => e.Epoch).ToHashSet();
        var verdicts = store.Verdicts(run.Id).Where(v => complete.Contains(v.Epoch)).ToDictionary(v => v.Epoch);
        var asked = (rowsOf ?? []).ToList();
        if (rowsOfFlagged)
        {
            var flagged = verdicts.Values.OrderBy(v => v.Epoch)
                .SelectMany(v => FindingsOf(store, run, v))
                .Select(f => f.Feature)
                .Where(name => name.Length > 0 && features.Contains(name, StringComparer.Ordinal))
                .ToList();
            // With nothing flagged the feature chart shows the top feature of the last attributed epoch: one map tells.
            if (flagged.Count == 0 && LastMap(store, run, method, stored) is { } last && last.HeldOut.Share.Length == features.Length)
                flagged.AddRange(EpochRecord.ByShare(last.HeldOut.Share).Take(1).Select(f => features[f]));
            asked.AddRange(flagged);
        }
        var rowFeatures = FeatureIndexes(run, features, asked);
        var (maps, columns) = FirstMapPerEpoch(store, run, method, features.Length, rowFeatures, complete);
        // Statistics come from the detector, which reads the primary method's maps only.
        var statistics = method == RunReview.PrimaryMethod(run)
            ? store.StatisticsOf(run.Id).Where(s => complete.Contains(s.Epoch) && s.Statistics is not null && s.Statistics.ShareHeldOut.Length == features.Length).ToDictionary(s => s.Epoch, s => s.Statistics!)
            : [];

        var epochs = stored.Select(e =>
        {
            maps.TryGetValue(e.Epoch, out var map);
            verdicts.TryGetValue(e.Epoch, out var verdict);
            return new EpochRecord(
                e.Epoch,
                Metric(e, MetricKeys.TrainLoss),
                Metric(e, MetricKeys.ValidationLoss),
                map is null ? [] : [.. map.HeldOut.Share],
                map is null ? [] : [.. map.Training.Share],
                verdict is null ? null : ParseVerdict(store, run, verdict),
                verdict is null ? [] : Reasons(verdict),
                [.. e.Problems])
            {
                HeldOutMeanAbsolute = map is null ? [] : [.. map.HeldOut.MeanAbsolute],
                TrainingMeanAbsolute = map is null ? [] : [.. map.Training.MeanAbsolute],
                HeldOutMeanSigned = map is null ? [] : [.. map.HeldOut.MeanSigned],
                TrainingMeanSigned = map is null ? [] : [.. map.Training.MeanSigned],
                HeldOutAlignment = map?.HeldOut.Alignment is { } heldOut && heldOut.Length == features.Length ? [.. heldOut] : [],
                TrainingAlignment = map?.Training.Alignment is { } training && training.Length == features.Length ? [.. training] : [],
                Statistics = statistics.GetValueOrDefault(e.Epoch),
                Findings = verdict is null ? [] : FindingsOf(store, run, verdict),
            };
        }).ToImmutableArray();
        var rows = rowFeatures.Select((f, i) => RowsOf(columns, i, f, features[f])).ToImmutableArray();
        return new RunHistory(run, method, features, epochs, rows);
    }

    // The first stored map of each epoch in `complete`, read one at a time and kept without its per-row scores; only the
    // columns of the features in rowFeatures are copied out, split into the halves (held-out rows are stored first).
    private static (Dictionary<int, MapDocument> Maps, SortedDictionary<int, (float[] HeldOut, float[] Training)[]> Columns) FirstMapPerEpoch(
        RunStore store, RunDocument run, string method, int features, int[] rowFeatures, HashSet<int> complete)
    {
        var maps = new Dictionary<int, MapDocument>();
        var columns = new SortedDictionary<int, (float[] HeldOut, float[] Training)[]>();
        store.VisitMaps(run.Id, method, map =>
        {
            // One target per run today; should a run hold several, the first stored one is read.
            if (maps.ContainsKey(map.Epoch) || !complete.Contains(map.Epoch))
                return;
            CheckWidth(store, run, map.Epoch, "held-out", map.HeldOut.Share, features);
            CheckWidth(store, run, map.Epoch, "training", map.Training.Share, features);
            if (map.Features != features || map.Scores.Length < (long)map.Rows * map.Features * sizeof(float))
                throw new StoreException($"store '{store.Path}': map of run '{DisplayText.Clean(run.Name)}' at epoch {map.Epoch} has {map.Features} features and {map.Scores.Length} bytes of scores for {map.Rows} rows; the run has {features} features; the store is damaged");
            if (rowFeatures.Length > 0)
                columns[map.Epoch] = Columns(run, map, rowFeatures);
            maps[map.Epoch] = map with { Scores = [], Deltas = null, OutputGaps = null };
        });
        return (maps, columns);
    }

    // The first stored map of the last complete epoch that has one for the method (as FirstMapPerEpoch would keep it).
    private static MapDocument? LastMap(RunStore store, RunDocument run, string method, IReadOnlyList<EpochDocument> complete) =>
        complete.Reverse()
            .Select(e => store.MapsAt(run.Id, e.Epoch).Where(m => m.Method == method).MinBy(m => m.Id))
            .FirstOrDefault(m => m is not null);

    private static (float[] HeldOut, float[] Training)[] Columns(RunDocument run, MapDocument map, int[] rowFeatures)
    {
        var scores = FloatBytes.ToFloats(map.Scores);
        int rows = map.Rows;
        int heldOut = Math.Min(run.HeldOutRows, rows);
        return rowFeatures.Select(feature =>
        {
            var heldOutScores = new float[heldOut];
            var trainingScores = new float[rows - heldOut];
            for (int r = 0; r < rows; r++)
            {
                float value = scores[r * map.Features + feature];
                if (r < heldOut)
                    heldOutScores[r] = value;
                else
                    trainingScores[r - heldOut] = value;
            }
            return (heldOutScores, trainingScores);
        }).ToArray();
    }

    private static int[] FeatureIndexes(RunDocument run, ImmutableArray<string> features, IEnumerable<string> names) =>
        names.Distinct(StringComparer.Ordinal).Select(name =>
        {
            int index = features.IndexOf(name, StringComparer.Ordinal);
            return index >= 0
                ? index
                : throw new DriftWatchException($"run '{DisplayText.Clean(run.Name)}' has no feature '{DisplayText.Clean(name)}'; its features: {DisplayText.Clean(string.Join(", ", features), 400)}");
        }).ToArray();

    // One feature's column of every attributed epoch's map, in epoch order.
    private static FeatureRows RowsOf(SortedDictionary<int, (float[] HeldOut, float[] Training)[]> columns, int position, int feature, string name) =>
        new(name, feature, [.. columns.Select(c => new EpochRows(c.Key, [.. c.Value[position].HeldOut], [.. c.Value[position].Training]))]);

    // Each finding carries its own severity: a Caution beside a Halt must not read as a Halt.
    private static ImmutableArray<string> Reasons(VerdictDocument verdict) =>
        verdict.Findings.Count > 0
            ? [.. verdict.Findings.Select(f => $"{f.Severity}: {f.Evidence}")]
            : [.. verdict.Reasons.Select(r => $"{verdict.Kind}: {r}")];

    private static ImmutableArray<Finding> FindingsOf(RunStore store, RunDocument run, VerdictDocument verdict)
    {
        try
        {
            return VerdictDocuments.FromDocument(verdict).Findings;
        }
        catch (ArgumentException e)
        {
            throw new StoreException($"store '{store.Path}': a finding of run '{DisplayText.Clean(run.Name)}' at epoch {verdict.Epoch} cannot be read ({DisplayText.Clean(e.Message)}); the store is damaged or from a newer DriftWatch", e);
        }
    }

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

/// <summary>One feature's per-row attributions at one epoch, split by half.</summary>
/// <param name="Epoch">The epoch.</param>
/// <param name="HeldOut">Scores of the held-out rows, in probe order.</param>
/// <param name="Training">Scores of the training rows, in probe order.</param>
public sealed record EpochRows(int Epoch, ImmutableArray<float> HeldOut, ImmutableArray<float> Training);

/// <summary>One feature's per-row attributions across the attributed epochs of a run.</summary>
/// <param name="Feature">The feature's name.</param>
/// <param name="FeatureIndex">Its index in the schema.</param>
/// <param name="Epochs">One entry per attributed epoch, in epoch order.</param>
public sealed record FeatureRows(string Feature, int FeatureIndex, ImmutableArray<EpochRows> Epochs);
