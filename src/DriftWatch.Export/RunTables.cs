using System.Collections.Immutable;
using DriftWatch.Detection;
using DriftWatch.Storage;

namespace DriftWatch.Export;

/// <summary>One feature's importance on one half at one epoch, for one method and target: a row of the tidy importance table.</summary>
/// <param name="Run">The run's name.</param>
/// <param name="Epoch">The epoch.</param>
/// <param name="Method">The attribution method.</param>
/// <param name="Target">The attributed output, e.g. <c>logit</c>.</param>
/// <param name="Half"><c>held-out</c> or <c>training</c>.</param>
/// <param name="Feature">The feature's name.</param>
/// <param name="Importance">Mean |attribution| over the half's rows (target units).</param>
/// <param name="Share">Share of the half's total mean |attribution|, 0 to 1.</param>
/// <param name="Lower">Share minus half the 90% bootstrap width (the noise floor), when the detector stored one for this method; else null.</param>
/// <param name="Upper">Share plus half the 90% bootstrap width, or null.</param>
/// <param name="SignedMean">Mean signed attribution over the half's rows (target units).</param>
/// <param name="Alignment">Label alignment, −1 to 1, or null without binary labels.</param>
/// <param name="ShareWidth">The 90% bootstrap width of this half's share (the noise floor <paramref name="Lower"/> and <paramref name="Upper"/> come from), or null.</param>
/// <param name="ShareGap">Training share minus held-out share (the leak rule's statistic); the same on both halves' rows; null where the detector stored none.</param>
/// <param name="ShareGapWidth">The 90% bootstrap width of the share gap (its noise floor), or null.</param>
/// <param name="AlignmentGap">Training alignment minus held-out alignment (the memorised-identifier and leak rules' statistic); the same on both halves' rows; or null.</param>
/// <param name="AlignmentGapWidth">The 90% bootstrap width of the alignment gap (its noise floor), or null.</param>
public sealed record ImportanceRow(
    string Run,
    int Epoch,
    string Method,
    string Target,
    string Half,
    string Feature,
    double Importance,
    double Share,
    double? Lower,
    double? Upper,
    double SignedMean,
    double? Alignment,
    double? ShareWidth = null,
    double? ShareGap = null,
    double? ShareGapWidth = null,
    double? AlignmentGap = null,
    double? AlignmentGapWidth = null);

/// <summary>One finding span of a run: a (kind, feature) found at consecutive stored epochs (<see cref="FindingSpans"/>), as its last epoch lists it.</summary>
/// <param name="Run">The run's name.</param>
/// <param name="FromEpoch">The span's first stored epoch.</param>
/// <param name="ToEpoch">The span's last stored epoch.</param>
/// <param name="Epochs">How many stored epochs the span covers.</param>
/// <param name="SinceEpoch">Where the rule's streak began at the span's first epoch (at most <paramref name="FromEpoch"/>).</param>
/// <param name="Kind">The finding kind's stored name, e.g. <c>Leak</c>.</param>
/// <param name="Feature">The feature, or empty for a run-level finding.</param>
/// <param name="Severity">Continue, Caution or Halt: what the finding asked for at the span's last epoch.</param>
/// <param name="Statistic">The finding's size at the span's last epoch, in <paramref name="Unit"/>; null when the kind has none.</param>
/// <param name="Measure">What <paramref name="Statistic"/> is (<see cref="Detection.Rules.FindingMeasure.Statistic"/>).</param>
/// <param name="Unit">The unit of the statistic and its bound (<see cref="Detection.Rules.FindingMeasure.Unit"/>).</param>
/// <param name="Bound">The noise floor or policy bound the statistic was judged against, in <paramref name="Unit"/>; null when none.</param>
/// <param name="BoundKind"><c>noise_floor</c>, <c>policy_bound</c> or <c>none</c> (<see cref="Detection.Rules.FindingMeasure.Bound"/>).</param>
/// <param name="Evidence">The evidence sentence at the span's last epoch.</param>
/// <param name="SeenOnlyBy">The methods whose maps alone showed it, comma-separated; empty for the verdict's method's own findings.</param>
/// <param name="Agreement">Spearman ρ of held-out importance between methods at the span's last epoch, or null.</param>
public sealed record FindingRow(
    string Run,
    int FromEpoch,
    int ToEpoch,
    int Epochs,
    int SinceEpoch,
    string Kind,
    string Feature,
    string Severity,
    double? Statistic,
    string Measure,
    string Unit,
    double? Bound,
    string BoundKind,
    string Evidence,
    string SeenOnlyBy,
    double? Agreement);

/// <summary>One epoch of a run: its verdict, the loop's metrics and the detector's epoch-level statistics.</summary>
/// <param name="Run">The run's name.</param>
/// <param name="Epoch">The epoch.</param>
/// <param name="Verdict">Continue, Caution or Halt, or null when none was stored.</param>
/// <param name="Findings">How many findings the verdict lists.</param>
/// <param name="Values">Metric values by column name: <see cref="RunTables.FixedMetrics"/> first, then the loop's other metrics as <c>metric_NAME</c>; null where unknown.</param>
public sealed record EpochRow(string Run, int Epoch, string? Verdict, int Findings, ImmutableDictionary<string, double?> Values);

/// <summary>
/// A run as three tidy tables: importance (one row per epoch, method, target, half and feature), epochs (one row per epoch) and
/// findings (one row per finding span).
/// </summary>
public sealed class RunTables
{
    /// <summary>The metric columns every epoch table has, in order.</summary>
    public static ImmutableArray<string> FixedMetrics { get; } =
    [
        MetricKeys.TrainLoss,
        MetricKeys.ValidationLoss,
        "drift_score",
        "rank_agreement_with_best",
        "jensen_shannon_from_previous",
        "top_five_jaccard",
        "generalisation_loss",
        "lead_width_held_out",
        "lead_width_training",
    ];

    private RunTables(string run, ImmutableArray<ImportanceRow> importance, ImmutableArray<EpochRow> epochs, ImmutableArray<FindingRow> findings, ImmutableArray<string> metrics)
    {
        Run = run;
        Importance = importance;
        Epochs = epochs;
        Findings = findings;
        MetricColumns = metrics;
    }

    /// <summary>The run's name.</summary>
    public string Run { get; }

    /// <summary>The importance table, ordered by epoch, method, target, half (held-out first), then schema order.</summary>
    public ImmutableArray<ImportanceRow> Importance { get; }

    /// <summary>The epoch table, in epoch order.</summary>
    public ImmutableArray<EpochRow> Epochs { get; }

    /// <summary>The findings table: one row per finding span, ordered by first epoch (see <see cref="FindingSpans.Collapse"/>).</summary>
    public ImmutableArray<FindingRow> Findings { get; }

    /// <summary>The epoch table's metric columns: <see cref="FixedMetrics"/>, then <c>metric_NAME</c> for each other metric the loop reported, sorted.</summary>
    public ImmutableArray<string> MetricColumns { get; }

    /// <summary>Reads a run's complete epochs from the store.</summary>
    /// <exception cref="StoreException">No such run, or stored data that does not fit together.</exception>
    public static RunTables Read(RunStore store, string runName)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(runName);
        var run = store.GetRun(runName);
        var features = run.Features.Select(f => f.Name).ToArray();
        string primary = RunReview.PrimaryMethod(run);
        var statistics = store.StatisticsOf(run.Id)
            .Where(s => s.Statistics is not null)
            .ToDictionary(s => s.Epoch, s => s.Statistics!);

        var importance = new List<ImportanceRow>();
        foreach (var map in store.MapAggregates(run.Id).OrderBy(m => m.Epoch).ThenBy(m => m.Method, StringComparer.Ordinal).ThenBy(m => m.Target, StringComparer.Ordinal))
        {
            var stats = map.Method == primary ? statistics.GetValueOrDefault(map.Epoch) : null;
            AddHalf(importance, run, store, map, "held-out", map.HeldOut, features, stats, stats?.ShareHeldOutWidth);
            AddHalf(importance, run, store, map, "training", map.Training, features, stats, stats?.ShareTrainingWidth);
        }

        var epochs = store.Epochs(run.Id);
        var verdicts = store.Verdicts(run.Id).ToDictionary(v => v.Epoch);
        var extra = epochs.SelectMany(e => e.Metrics.Keys)
            .Where(k => k is not (MetricKeys.TrainLoss or MetricKeys.ValidationLoss))
            .Distinct(StringComparer.Ordinal)
            .Order(StringComparer.Ordinal)
            .ToList();
        var columns = FixedMetrics.AddRange(extra.Select(k => "metric_" + k));
        var epochRows = epochs.Select(e =>
        {
            var s = statistics.GetValueOrDefault(e.Epoch);
            var values = ImmutableDictionary.CreateBuilder<string, double?>(StringComparer.Ordinal);
            values[MetricKeys.TrainLoss] = Metric(e, MetricKeys.TrainLoss);
            values[MetricKeys.ValidationLoss] = Metric(e, MetricKeys.ValidationLoss);
            values["drift_score"] = Finite(s?.Drift);
            values["rank_agreement_with_best"] = Finite(s?.RankAgreementWithBest);
            values["jensen_shannon_from_previous"] = Finite(s?.JensenShannonFromPrevious);
            values["top_five_jaccard"] = Finite(s?.TopFiveJaccard);
            values["generalisation_loss"] = Finite(s?.GeneralisationLoss);
            values["lead_width_held_out"] = s is { Trusted: true } ? Finite(s.LeadWidthHeldOut) : null;
            values["lead_width_training"] = s is { Trusted: true } ? Finite(s.LeadWidthTraining) : null;
            foreach (string key in extra)
                values["metric_" + key] = Metric(e, key);
            verdicts.TryGetValue(e.Epoch, out var verdict);
            return new EpochRow(run.Name, e.Epoch, verdict?.Kind, verdict?.Findings.Count ?? 0, values.ToImmutable());
        }).ToImmutableArray();
        var index = features.Select((name, i) => (name, i)).GroupBy(p => p.name, StringComparer.Ordinal).ToDictionary(g => g.Key, g => g.First().i, StringComparer.Ordinal);
        var findings = FindingSpans.Collapse(store.StoredVerdicts(run.Id)).Select(span =>
        {
            var f = span.Latest;
            var measure = FindingMeasures.Of(f, statistics.GetValueOrDefault(span.ToEpoch), index.GetValueOrDefault(f.Feature, -1));
            return new FindingRow(
                run.Name,
                span.FromEpoch,
                span.ToEpoch,
                span.EpochCount,
                span.SinceEpoch,
                f.Kind.Name,
                f.Feature,
                f.Severity.ToString(),
                measure.Statistic == "none" ? null : Finite(f.Size),
                measure.Statistic,
                measure.Unit,
                measure.HasBound ? Finite(f.NoiseFloor) : null,
                measure.Bound,
                f.Evidence,
                f.IsSeenByOtherMethodsOnly ? string.Join(",", f.SeenOnlyBy) : "",
                Finite(f.Agreement));
        }).ToImmutableArray();
        return new RunTables(run.Name, [.. importance], epochRows, findings, columns);
    }

    private static void AddHalf(List<ImportanceRow> rows, RunDocument run, RunStore store, MapDocument map, string half, ImportanceDocument importance, string[] features, EpochStatistics? stats, ImmutableArray<double>? widthArray)
    {
        double[]? widths = widthArray is { IsDefault: false } w ? [.. w] : null;
        static double? At(ImmutableArray<double>? values, int f, int count) => values is { IsDefault: false } v && v.Length == count && double.IsFinite(v[f]) ? v[f] : null;
        if (importance.Share.Length != features.Length || importance.MeanAbsolute.Length != features.Length || importance.MeanSigned.Length != features.Length)
        {
            throw new StoreException(
                $"store '{store.Path}': the {half} aggregates of run '{run.Name}' at epoch {map.Epoch} ({map.Method}) have {importance.Share.Length} features but the run has {features.Length}; the store is damaged");
        }
        bool banded = widths is not null && widths.Length == features.Length;
        bool aligned = importance.Alignment is not null && importance.Alignment.Length == features.Length;
        for (int f = 0; f < features.Length; f++)
        {
            double share = importance.Share[f];
            rows.Add(new ImportanceRow(
                run.Name,
                map.Epoch,
                map.Method,
                map.Target,
                half,
                features[f],
                importance.MeanAbsolute[f],
                share,
                banded ? share - widths![f] / 2 : null,
                banded ? share + widths![f] / 2 : null,
                importance.MeanSigned[f],
                aligned ? importance.Alignment![f] : null,
                banded ? widths![f] : null,
                At(stats?.ShareGap, f, features.Length),
                At(stats?.ShareGapWidth, f, features.Length),
                At(stats?.AlignmentGap, f, features.Length),
                At(stats?.AlignmentGapWidth, f, features.Length)));
        }
    }

    private static double? Metric(EpochDocument epoch, string key) =>
        epoch.Metrics.TryGetValue(key, out double value) ? value : null;

    private static double? Finite(double? value) => value is double v && double.IsFinite(v) ? v : null;
}
