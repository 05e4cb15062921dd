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
    double? Alignment);

/// <summary>One epoch of a run: its verdict, the loop's metrics and the detector's epoch-level statistics.</summary>
/// <param name="Run">The run's name.</param>
/// <param name="Epoch">The epoch.</param>
/// <param name="Verdict">Continue, Caution or Halt, or null when none was stored.</param>
/// <param name="Findings">How many findings the verdict lists.</param>
/// <param name="Values">Metric values by column name: <see cref="RunTables.FixedMetrics"/> first, then the loop's other metrics as <c>metric_NAME</c>; null where unknown.</param>
public sealed record EpochRow(string Run, int Epoch, string? Verdict, int Findings, ImmutableDictionary<string, double?> Values);

/// <summary>A run as two tidy tables: importance (one row per epoch, method, target, half and feature) and epochs (one row per epoch).</summary>
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
    ];

    private RunTables(string run, ImmutableArray<ImportanceRow> importance, ImmutableArray<EpochRow> epochs, ImmutableArray<string> metrics)
    {
        Run = run;
        Importance = importance;
        Epochs = epochs;
        MetricColumns = metrics;
    }

    /// <summary>The run's name.</summary>
    public string Run { get; }

    /// <summary>The importance table, ordered by epoch, method, target, half (held-out first), then schema order.</summary>
    public ImmutableArray<ImportanceRow> Importance { get; }

    /// <summary>The epoch table, in epoch order.</summary>
    public ImmutableArray<EpochRow> Epochs { get; }

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
            AddHalf(importance, run, store, map, "held-out", map.HeldOut, features, stats?.ShareHeldOutWidth.ToArray());
            AddHalf(importance, run, store, map, "training", map.Training, features, stats?.ShareTrainingWidth.ToArray());
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
            foreach (string key in extra)
                values["metric_" + key] = Metric(e, key);
            verdicts.TryGetValue(e.Epoch, out var verdict);
            return new EpochRow(run.Name, e.Epoch, verdict?.Kind, verdict?.Findings.Count ?? 0, values.ToImmutable());
        }).ToImmutableArray();
        return new RunTables(run.Name, [.. importance], epochRows, columns);
    }

    private static void AddHalf(List<ImportanceRow> rows, RunDocument run, RunStore store, MapDocument map, string half, ImportanceDocument importance, string[] features, double[]? widths)
    {
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
                aligned ? importance.Alignment![f] : null));
        }
    }

    private static double? Metric(EpochDocument epoch, string key) =>
        epoch.Metrics.TryGetValue(key, out double value) ? value : null;

    private static double? Finite(double? value) => value is double v && double.IsFinite(v) ? v : null;
}
