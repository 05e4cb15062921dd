using DriftWatch.Detection;
using ScottPlot;

namespace DriftWatch.Charts;

/// <summary>
/// Divergence between the halves, one column per feature (those a finding names first, then the top ones by held-out share):
/// the share of importance on the training half against the held-out half, each in its noise-floor band, and beneath it
/// the label alignment of each half with the alignment gap's noise floor around the held-out line.
/// </summary>
public sealed class DivergenceChart : IChart
{
    /// <summary>Features drawn when no number is given.</summary>
    public const int DefaultFeatures = 4;

    /// <summary>The most features (columns) one chart draws; more columns become too narrow to read at 1200 pixels.</summary>
    public const int MaximumFeatures = 6;

    private const int ColumnNameLength = 28;

    /// <summary>Creates the chart.</summary>
    /// <param name="features">How many features to draw, flagged ones first. Default <see cref="DefaultFeatures"/>.</param>
    /// <param name="feature">A feature to draw first, whatever its rank; null for none.</param>
    /// <exception cref="DriftWatchException"><paramref name="features"/> is outside 1..<see cref="MaximumFeatures"/>.</exception>
    public DivergenceChart(int features = DefaultFeatures, string? feature = null)
    {
        if (features is < 1 or > MaximumFeatures)
            throw new DriftWatchException($"the divergence chart draws between 1 and {MaximumFeatures} features; got {features}");
        Features = features;
        Feature = feature;
    }

    /// <summary>How many features are drawn.</summary>
    public int Features { get; }

    /// <summary>The feature drawn first, or null.</summary>
    public string? Feature { get; }

    /// <inheritdoc />
    public string Name => "divergence";

    /// <summary>The features drawn: <paramref name="first"/> if given, then those a finding names (in order of first finding), then the top by held-out share at the last attributed epoch.</summary>
    public static IReadOnlyList<int> Choose(RunHistory history, int count, string? first = null)
    {
        ArgumentNullException.ThrowIfNull(history);
        var chosen = new List<int>();
        if (first is not null)
        {
            int index = history.FeatureIndex(first);
            if (index < 0)
                throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no feature '{DisplayText.Clean(first)}'; its features: {DisplayText.Clean(string.Join(", ", history.FeatureNames), 400)}");
            chosen.Add(index);
        }
        chosen.AddRange(FlaggedFeatures(history));
        chosen.AddRange(history.LastAttributed?.TopByHeldOutShare(history.FeatureNames.Length) ?? []);
        return chosen.Distinct().Take(count).ToList();
    }

    /// <summary>The features that some finding names, in the order they were first named.</summary>
    public static IReadOnlyList<int> FlaggedFeatures(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        return history.Epochs
            .SelectMany(e => e.Findings)
            .Where(f => f.Feature.Length > 0)
            .Select(f => history.FeatureIndex(f.Feature))
            .Where(i => i >= 0)
            .Distinct()
            .ToList();
    }

    /// <inheritdoc />
    public void Render(RunHistory history, string path, ChartSize size)
    {
        ChartKit.RequireEpochs(history);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        ChartFonts.EnsureRegistered();
        var scale = new TextScale(size);
        var features = Choose(history, Features, Feature);
        var attributed = history.Epochs.Where(e => e.IsAttributed).ToList();
        var flagged = FlaggedFeatures(history).ToHashSet();

        var shareRow = new List<Plot>();
        var alignmentRow = new List<Plot>();
        var heldOutColor = ChartPalette.HeldOut;
        var trainingColor = ChartPalette.Training;
        float width = 2.2f * scale.Factor;
        float marker = attributed.Count <= 40 ? 6 * scale.Factor : 0;
        bool anyBand = false;
        bool anyAlignment = false;
        (bool Caution, bool Halt) shaded = default;

        if (features.Count == 0)
        {
            var empty = ChartKit.NewPlot(scale);
            ChartKit.EpochAxis(empty, history);
            ChartKit.Note(empty, (history.Epochs[0].Epoch + (double)history.Epochs[^1].Epoch) / 2, $"no attribution maps stored for method {DisplayText.Clean(history.Method, 40)}", scale);
            shareRow.Add(empty);
            var emptyBelow = ChartKit.NewPlot(scale);
            ChartKit.EpochAxis(emptyBelow, history);
            alignmentRow.Add(emptyBelow);
        }

        for (int column = 0; column < features.Count; column++)
        {
            int f = features[column];
            var shares = ChartKit.NewPlot(scale);
            var alignment = ChartKit.NewPlot(scale);
            shaded = ChartKit.ShadeVerdicts(shares, history);
            ChartKit.ShadeVerdicts(alignment, history);

            var drawn = new List<double>();
            var heldOutBand = ChartKit.Band(shares, attributed, e => e.Statistics is { } s && s.ShareHeldOutWidth.Length > f
                ? ((e.HeldOutShare[f] - s.ShareHeldOutWidth[f] / 2) * 100, (e.HeldOutShare[f] + s.ShareHeldOutWidth[f] / 2) * 100)
                : null, heldOutColor.WithAlpha(0.18));
            var trainingBand = ChartKit.Band(shares, attributed, e => e.Statistics is { } s && s.ShareTrainingWidth.Length > f
                ? ((e.TrainingShare[f] - s.ShareTrainingWidth[f] / 2) * 100, (e.TrainingShare[f] + s.ShareTrainingWidth[f] / 2) * 100)
                : null, trainingColor.WithAlpha(0.16));
            anyBand |= heldOutBand.Count + trainingBand.Count > 0;
            drawn.AddRange(heldOutBand);
            drawn.AddRange(trainingBand);
            foreach (var (xs, ys) in ChartKit.Segments(attributed, e => e.HeldOutShare[f] * 100))
            {
                ChartKit.AddLine(shares, xs, ys, heldOutColor, LinePattern.Solid, width, MarkerShape.FilledCircle, marker);
                drawn.AddRange(ys);
            }
            foreach (var (xs, ys) in ChartKit.Segments(attributed, e => e.TrainingShare[f] * 100))
            {
                ChartKit.AddLine(shares, xs, ys, trainingColor, LinePattern.Dashed, width, MarkerShape.FilledSquare, marker);
                drawn.AddRange(ys);
            }
            ChartKit.FitY(shares, drawn, floor: 0, includeZero: true);

            var aligned = attributed.Where(e => e.HeldOutAlignment.Length > f && e.TrainingAlignment.Length > f).ToList();
            if (aligned.Count == 0)
            {
                ChartKit.Note(alignment, (history.Epochs[0].Epoch + (double)history.Epochs[^1].Epoch) / 2, "no label alignment (labels not binary)", scale);
            }
            else
            {
                anyAlignment = true;
                var alignmentDrawn = ChartKit.Band(alignment, aligned, e => e.Statistics is { } s && s.AlignmentGapWidth.Length > f
                    ? (e.HeldOutAlignment[f] - s.AlignmentGapWidth[f], e.HeldOutAlignment[f] + s.AlignmentGapWidth[f])
                    : null, ChartPalette.Muted.WithAlpha(0.22));
                var zero = alignment.Add.HorizontalLine(0, 1, ChartPalette.Zero, LinePattern.Solid);
                zero.ExcludeFromLegend = true;
                foreach (var (xs, ys) in ChartKit.Segments(aligned, e => e.HeldOutAlignment[f]))
                {
                    ChartKit.AddLine(alignment, xs, ys, heldOutColor, LinePattern.Solid, width, MarkerShape.FilledCircle, marker);
                    alignmentDrawn.AddRange(ys);
                }
                foreach (var (xs, ys) in ChartKit.Segments(aligned, e => e.TrainingAlignment[f]))
                {
                    ChartKit.AddLine(alignment, xs, ys, trainingColor, LinePattern.Dashed, width, MarkerShape.FilledSquare, marker);
                    alignmentDrawn.AddRange(ys);
                }
                ChartKit.FitY(alignment, alignmentDrawn, floor: -1.05, ceiling: 1.05, includeZero: true);
            }

            string name = DisplayText.Clean(history.FeatureNames[f], ColumnNameLength);
            shares.Title(flagged.Contains(f) ? name + " (flagged)" : name, scale.Tick + 1);
            alignment.XLabel("epoch", scale.AxisLabel);
            if (column == 0)
            {
                shares.YLabel("share of mean |attribution| (%)", scale.AxisLabel);
                alignment.YLabel("label alignment", scale.AxisLabel);
            }
            ChartKit.EpochAxis(shares, history);
            ChartKit.EpochAxis(alignment, history);
            shareRow.Add(shares);
            alignmentRow.Add(alignment);
        }

        var shareKey = ChartKit.NewKey(scale);
        shareKey.Legend.ManualItems.Add(ChartKit.LineItem("held-out half", heldOutColor, LinePattern.Solid, width, MarkerShape.FilledCircle, marker));
        shareKey.Legend.ManualItems.Add(ChartKit.LineItem("training half", trainingColor, LinePattern.Dashed, width, MarkerShape.FilledSquare, marker));
        if (anyBand)
            shareKey.Legend.ManualItems.Add(ChartKit.FillItem("noise floor (90% band)", ChartPalette.Muted.WithAlpha(0.25)));
        var alignmentKey = ChartKit.NewKey(scale);
        if (anyAlignment)
        {
            alignmentKey.Legend.ManualItems.Add(ChartKit.LineItem("held-out alignment", heldOutColor, LinePattern.Solid, width, MarkerShape.FilledCircle, marker));
            alignmentKey.Legend.ManualItems.Add(ChartKit.LineItem("training alignment", trainingColor, LinePattern.Dashed, width, MarkerShape.FilledSquare, marker));
            alignmentKey.Legend.ManualItems.Add(ChartKit.FillItem("held-out ± gap noise floor", ChartPalette.Muted.WithAlpha(0.22)));
        }
        ChartKit.VerdictKey(alignmentKey.Legend, shaded, history);

        string[] title =
        [
            $"{ChartKit.RunTitle(history)}: training half against held-out half ({DisplayText.Clean(history.Method, 40)})",
            features.Count == 0 ? "no features to draw" : "above: share of importance; below: label alignment (+1 when attributions point at the true label)",
        ];
        ChartKit.Compose(path, size, scale, title,
        [
            new PanelRow(shareRow, shareKey, 1.15f, ShowsXLabel: false),
            new PanelRow(alignmentRow, alignmentKey, 1, ShowsXLabel: true),
        ], left: 72, columnTitles: true);
    }
}
