using DriftWatch.Detection;
using DriftWatch.Detection.Rules;
using DriftWatch.Options;
using DriftWatch.Storage;

namespace DriftWatch.Charts;

/// <summary>The kinds of chart of one run.</summary>
public enum ChartKind
{
    /// <summary><see cref="EvidenceChart"/>: the statistic a finding's rule judges, against its bound.</summary>
    Evidence,

    /// <summary><see cref="TrendChart"/>.</summary>
    Trend,

    /// <summary><see cref="DivergenceChart"/>.</summary>
    Divergence,

    /// <summary><see cref="HeatmapChart"/>.</summary>
    Heatmap,

    /// <summary><see cref="DriftChart"/>.</summary>
    Drift,

    /// <summary><see cref="FeatureDetailChart"/>.</summary>
    Feature,
}

/// <summary>What to draw beyond the kind: how many features, which feature, which heatmap value.</summary>
/// <remarks>Every setting is checked when it is set (<c>new</c> or <c>with</c>), with the message the chart itself gives.</remarks>
public sealed record ChartOptions
{
    private static readonly IntegerRange TopFeaturesRange =
        IntegerRange.Between(1, TrendChart.MaximumTopFeatures) with { Rule = $"draws between 1 and {TrendChart.MaximumTopFeatures} features" };

    private static readonly IntegerRange DivergenceFeaturesRange =
        IntegerRange.Between(1, DivergenceChart.MaximumFeatures) with { Rule = $"draws between 1 and {DivergenceChart.MaximumFeatures} features" };

    /// <summary>Features in the trend chart, 1 to <see cref="TrendChart.MaximumTopFeatures"/>. Default <see cref="TrendChart.DefaultTopFeatures"/>.</summary>
    /// <exception cref="DriftWatchException">Out of range.</exception>
    public int TopFeatures { get; init => field = TopFeaturesRange.Check(value, "the trend chart"); } = TrendChart.DefaultTopFeatures;

    /// <summary>Columns of the divergence chart, 1 to <see cref="DivergenceChart.MaximumFeatures"/>. Default <see cref="DivergenceChart.DefaultFeatures"/>.</summary>
    /// <exception cref="DriftWatchException">Out of range.</exception>
    public int DivergenceFeatures { get; init => field = DivergenceFeaturesRange.Check(value, "the divergence chart"); } = DivergenceChart.DefaultFeatures;

    /// <summary>The feature of the feature detail chart (also drawn first in the divergence chart); null picks <see cref="ChartCatalog.DefaultFeature"/>.</summary>
    public string? Feature { get; init; }

    /// <summary>The kind of finding whose evidence chart to draw; null draws the run's most severe finding's (<see cref="ChartCatalog.MostSevere"/>).</summary>
    /// <exception cref="DriftWatchException">A kind this version has no evidence chart for.</exception>
    public FindingKind? EvidenceKind
    {
        get;
        init => field = value is not FindingKind k || EvidencePlans.For(k) is not null ? value
            : throw new DriftWatchException($"no evidence chart for finding kind '{DisplayText.Clean(k.Name, 40)}'; known kinds: {string.Join(", ", EvidencePlans.ByKind.Keys.Select(ChartCatalog.Spelling))}");
    }

    /// <summary>What the heatmap shows. Default <see cref="HeatmapValue.Share"/>.</summary>
    /// <exception cref="DriftWatchException">Not one of the named values.</exception>
    public HeatmapValue HeatmapValue
    {
        get;
        init => field = Enum.IsDefined(value) ? value
            : throw new DriftWatchException($"heatmap value must be {string.Join(", ", Enum.GetNames<HeatmapValue>())}; got {(int)value}");
    } = HeatmapValue.Share;

    /// <summary>Whether the heatmap may be drawn taller than the size asked for, so that many features' names stay readable (<see cref="HeatmapChart.ReadableHeight"/>). Default true.</summary>
    public bool GrowHeatmap { get; init; } = true;
}

/// <summary>Builds the charts of a run by kind, and renders a set of them to a folder.</summary>
public static class ChartCatalog
{
    /// <summary>Every kind, in the order a report shows them.</summary>
    public static IReadOnlyList<ChartKind> All { get; } = [ChartKind.Evidence, ChartKind.Trend, ChartKind.Divergence, ChartKind.Heatmap, ChartKind.Drift, ChartKind.Feature];

    /// <summary>The kind's name as the command line spells it.</summary>
    public static string Spelling(ChartKind kind) => kind.ToString().ToLowerInvariant();

    /// <summary>A finding kind as the command line spells it: its stored name in lower case, words joined by hyphens (<c>memorised-identifier</c>).</summary>
    public static string Spelling(FindingKind kind)
    {
        var text = new System.Text.StringBuilder();
        foreach (char c in kind.Name)
        {
            if (char.IsUpper(c) && text.Length > 0)
                text.Append('-');
            text.Append(char.ToLowerInvariant(c));
        }
        return text.ToString();
    }

    /// <summary>Parses a finding kind as <see cref="Spelling(FindingKind)"/> spells it (or its stored name), among the kinds with an evidence chart.</summary>
    /// <exception cref="DriftWatchException">Not such a kind.</exception>
    public static FindingKind ParseFinding(string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        string word = text.Trim();
        foreach (var kind in EvidencePlans.ByKind.Keys)
        {
            if (string.Equals(Spelling(kind), word, StringComparison.OrdinalIgnoreCase) || string.Equals(kind.Name, word, StringComparison.OrdinalIgnoreCase))
                return kind;
        }
        throw new DriftWatchException($"--finding must be one of {string.Join(", ", EvidencePlans.ByKind.Keys.Select(Spelling))}; got '{DisplayText.Clean(text, 40)}'");
    }

    /// <summary>Every finding of the run with the epoch whose verdict holds it, in epoch order.</summary>
    public static IEnumerable<(int Epoch, Finding Finding)> Findings(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        return history.Epochs.SelectMany(e => e.Findings.Select(f => (e.Epoch, f)));
    }

    /// <summary>
    /// The run's most severe finding: Halt before Caution, then the kind first in verdict order (<see cref="FindingRules.Kinds"/>),
    /// then the earliest; only kinds with an evidence chart count. Null when the run has none.
    /// </summary>
    public static Finding? MostSevere(RunHistory history) =>
        Findings(history)
            .Where(f => EvidencePlans.For(f.Finding.Kind) is not null)
            .OrderByDescending(f => f.Finding.Severity)
            .ThenBy(f => FindingRules.IndexOf(f.Finding.Kind) is int i and >= 0 ? i : int.MaxValue)
            .ThenBy(f => f.Epoch)
            .Select(f => f.Finding)
            .FirstOrDefault();

    /// <summary>The charts drawn when none is named: the evidence chart of the run's most severe finding, then the trend chart; the trend chart alone for a run with no finding.</summary>
    public static IReadOnlyList<ChartKind> Leading(RunHistory history) =>
        MostSevere(history) is null ? [ChartKind.Trend] : [ChartKind.Evidence, ChartKind.Trend];

    /// <summary>Parses a kind as the command line spells it; <c>all</c> gives every kind.</summary>
    /// <exception cref="DriftWatchException">Not a known kind.</exception>
    public static IReadOnlyList<ChartKind> Parse(string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        string word = text.Trim().ToLowerInvariant();
        if (word == "all")
            return All;
        foreach (var kind in All)
        {
            if (Spelling(kind) == word)
                return [kind];
        }
        throw new DriftWatchException($"--kind must be one of {string.Join(", ", All.Select(Spelling))} or all; got '{DisplayText.Clean(text, 40)}'");
    }

    /// <summary>The feature a detail chart shows when none is named: the first one a finding names, else the top one by held-out share; null when nothing was attributed.</summary>
    public static string? DefaultFeature(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        var flagged = DivergenceChart.FlaggedFeatures(history);
        if (flagged.Count > 0)
            return history.FeatureNames[flagged[0]];
        var top = history.LastAttributed?.TopByHeldOutShare(1) ?? [];
        return top.IsEmpty ? null : history.FeatureNames[top[0]];
    }

    /// <summary>The chart of <paramref name="kind"/> with <paramref name="choices"/>; a feature detail chart gets the chosen or default feature.</summary>
    /// <exception cref="DriftWatchException">A choice is out of range, or a feature chart of a run with no attributed epoch and no feature named.</exception>
    public static IChart Create(ChartKind kind, RunHistory history, ChartOptions choices)
    {
        ArgumentNullException.ThrowIfNull(history);
        ArgumentNullException.ThrowIfNull(choices);
        return kind switch
        {
            ChartKind.Evidence => new EvidenceChart(choices.EvidenceKind, choices.Feature),
            ChartKind.Trend => new TrendChart(choices.TopFeatures),
            ChartKind.Divergence => new DivergenceChart(choices.DivergenceFeatures, choices.Feature),
            ChartKind.Heatmap => new HeatmapChart(choices.HeatmapValue),
            ChartKind.Drift => new DriftChart(),
            ChartKind.Feature => new FeatureDetailChart(choices.Feature ?? DefaultFeature(history)
                ?? throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no attributed epoch with method '{DisplayText.Clean(history.Method)}'; name a feature with --feature to chart one")),
            _ => throw new ArgumentOutOfRangeException(nameof(kind), kind, "unknown chart kind"),
        };
    }

    /// <summary>
    /// Renders the charts of <paramref name="kinds"/> into <paramref name="folder"/> and returns their paths in order.
    /// Reads the per-row scores the feature chart needs from <paramref name="store"/> only when it is asked for.
    /// </summary>
    /// <param name="store">The open store the history came from.</param>
    /// <param name="history">The run's history.</param>
    /// <param name="kinds">Which charts.</param>
    /// <param name="choices">What to draw in them.</param>
    /// <param name="folder">The output folder; created when missing.</param>
    /// <param name="size">The picture size.</param>
    /// <param name="progress">Called with each chart's kind before it is rendered; may be null.</param>
    /// <exception cref="DriftWatchException">A choice is out of range or a file cannot be written.</exception>
    public static IReadOnlyList<(ChartKind Kind, string Path)> RenderAll(
        RunStore store, RunHistory history, IReadOnlyList<ChartKind> kinds, ChartOptions choices, string folder, ChartSize size, Action<ChartKind>? progress = null)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(history);
        ArgumentNullException.ThrowIfNull(kinds);
        ArgumentNullException.ThrowIfNull(choices);
        ArgumentNullException.ThrowIfNull(folder);
        var charts = kinds.Select(k => (Kind: k, Chart: Create(k, history, choices))).ToList();
        var detail = charts.Select(c => c.Chart).OfType<FeatureDetailChart>().FirstOrDefault();
        var needed = new List<string>();
        if (detail is not null)
            needed.Add(detail.Feature);
        foreach (var evidence in charts.Select(c => c.Chart).OfType<EvidenceChart>())
        {
            if (evidence.Choose(history) is var (kind, feature) && feature is not null && EvidencePlans.For(kind) is { NeedsRows: true })
                needed.Add(feature);
        }
        if (needed.Any(f => !history.Rows.Any(r => r.Feature == f)))
            history = history.WithRows(store, [.. needed.Concat(history.Rows.Select(r => r.Feature)).Distinct(StringComparer.Ordinal)]);

        var written = new List<(ChartKind, string)>();
        foreach (var (kind, chart) in charts)
        {
            progress?.Invoke(kind);
            string path = Path.Combine(folder, ChartFiles.FileName(history.RunName, chart.Name, history.Method));
            var chartSize = kind == ChartKind.Heatmap && choices.GrowHeatmap ? new ChartSize(size.Width, HeatmapChart.ReadableHeight(history, size.Height)) : size;
            try
            {
                Directory.CreateDirectory(folder);
                chart.Render(history, path, chartSize);
            }
            catch (Exception e) when (e is IOException or UnauthorizedAccessException)
            {
                throw new DriftWatchException($"cannot write the chart to '{DisplayText.Clean(path)}': {e.Message}", e);
            }
            written.Add((kind, path));
        }
        return written;
    }
}
