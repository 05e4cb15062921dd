using System.Globalization;
using DriftWatch.Detection;
using ScottPlot;

namespace DriftWatch.Charts;

/// <summary>
/// Share of importance per feature across epochs for the top features, held-out half solid and training half dashed,
/// each held-out line in its noise-floor band, with a ring at the first and last epoch of each span where a finding names the feature;
/// beneath, an aligned panel of train and validation loss. The first Caution and the first Halt are marked on both.
/// </summary>
public sealed class TrendChart : IChart
{
    /// <summary>Features drawn when no number is given.</summary>
    public const int DefaultTopFeatures = 8;

    /// <summary>The most features one chart draws; more lines than this cannot be told apart.</summary>
    public const int MaximumTopFeatures = 20;

    // Up to this many attributed epochs every point gets a marker; beyond it each line gets about MarkersPerLine.
    private const int MarkEveryPointUpTo = 60;
    private const int MarkersPerLine = 15;

    /// <summary>Creates the chart.</summary>
    /// <param name="topFeatures">How many features to draw, ranked by held-out share at the last attributed epoch. Default <see cref="DefaultTopFeatures"/>.</param>
    /// <exception cref="DriftWatchException"><paramref name="topFeatures"/> is outside 1..<see cref="MaximumTopFeatures"/>.</exception>
    public TrendChart(int topFeatures = DefaultTopFeatures)
    {
        if (topFeatures is < 1 or > MaximumTopFeatures)
            throw new DriftWatchException($"the trend chart draws between 1 and {MaximumTopFeatures} features; got {topFeatures}");
        TopFeatures = topFeatures;
    }

    /// <summary>How many features are drawn.</summary>
    public int TopFeatures { get; }

    /// <inheritdoc />
    public string Name => "trend";

    /// <inheritdoc />
    public void Render(RunHistory history, string path, ChartSize size)
    {
        ChartKit.RequireEpochs(history);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        ChartFonts.EnsureRegistered();

        var scale = new TextScale(size);
        var shares = ChartKit.NewPlot(scale);
        var losses = ChartKit.NewPlot(scale);
        var sharesKey = ChartKit.NewKey(scale);
        var lossesKey = ChartKit.NewKey(scale);

        var shaded = ChartKit.ShadeVerdicts(shares, history);
        ChartKit.ShadeVerdicts(losses, history);
        var last = history.LastAttributed;
        var ranked = last?.TopByHeldOutShare(TopFeatures) ?? [];
        DrawShares(shares, sharesKey.Legend, history, ranked, scale);
        DrawLosses(losses, lossesKey.Legend, history, scale);
        ChartKit.VerdictKey(lossesKey.Legend, shaded, history);

        shares.YLabel("share of mean |attribution| (%)", scale.AxisLabel);
        losses.YLabel("loss", scale.AxisLabel);
        losses.XLabel("epoch", scale.AxisLabel);
        ChartKit.EpochAxis(shares, history);
        ChartKit.EpochAxis(losses, history);

        ChartKit.Compose(path, size, scale, Title(history, last, ranked.Length),
        [
            new PanelRow([shares], sharesKey, 2, ShowsXLabel: false),
            new PanelRow([losses], lossesKey, 1, ShowsXLabel: true),
        ]);
    }

    private static string[] Title(RunHistory history, EpochRecord? last, int drawn)
    {
        string head = $"{ChartKit.RunTitle(history)}: share of importance per feature ({DisplayText.Clean(history.Method, 40)})";
        string detail = last is null
            ? "no attribution maps stored for this method"
            : drawn == history.FeatureNames.Length
                ? $"all {drawn} features, ranked by held-out share at epoch {last.Epoch.ToString(CultureInfo.InvariantCulture)}"
                : $"top {drawn} of {history.FeatureNames.Length} features, ranked by held-out share at epoch {last.Epoch.ToString(CultureInfo.InvariantCulture)}";
        string? undrawn = ChartKit.UndrawnNote(ChartKit.Undrawn(history.Epochs.SelectMany(e => new[] { e.TrainLoss, e.ValidationLoss })), "losses");
        return undrawn is null ? [head, detail] : [head, detail, undrawn];
    }

    private static void DrawShares(Plot plot, Legend legend, RunHistory history, IReadOnlyList<int> ranked, TextScale scale)
    {
        var attributed = history.Epochs.Where(e => e.IsAttributed).ToList();
        if (attributed.Count == 0)
        {
            ChartKit.Note(plot, (history.Epochs[0].Epoch + (double)history.Epochs[^1].Epoch) / 2, $"no attribution maps stored for method {DisplayText.Clean(history.Method, 40)}", scale);
            return;
        }

        // Markers tell lines apart beyond colour. On many epochs a marker at every point would merge into a
        // thick band, so only every stride-th point gets one, staggered per feature so they do not pile up.
        int stride = attributed.Count <= MarkEveryPointUpTo ? 1 : (int)Math.Ceiling(attributed.Count / (double)MarkersPerLine);
        float markerSize = 7 * scale.Factor;
        var drawn = new List<double>();
        bool banded = false;
        bool flagged = false;

        // Bands first, so every line lies above every band.
        for (int rank = 0; rank < ranked.Count; rank++)
        {
            int feature = ranked[rank];
            var band = ChartKit.Band(plot, attributed, e => e.Statistics is { } s && s.ShareHeldOutWidth.Length > feature
                ? ((e.HeldOutShare[feature] - s.ShareHeldOutWidth[feature] / 2) * 100, (e.HeldOutShare[feature] + s.ShareHeldOutWidth[feature] / 2) * 100)
                : null, ChartPalette.Line(rank).WithAlpha(0.16));
            banded |= band.Count > 0;
            drawn.AddRange(band);
        }

        for (int rank = 0; rank < ranked.Count; rank++)
        {
            int feature = ranked[rank];
            var color = ChartPalette.Line(rank);
            var shape = ChartPalette.Marker(rank);
            var heldOut = ChartKit.Segments(attributed, e => e.HeldOutShare[feature] * 100);
            var training = ChartKit.Segments(attributed, e => e.TrainingShare[feature] * 100);
            drawn.AddRange(heldOut.Concat(training).SelectMany(p => p.Ys));

            foreach (var (xs, ys) in heldOut)
                ChartKit.AddLine(plot, xs, ys, color, LinePattern.Solid, 2.2f * scale.Factor, shape, stride == 1 ? markerSize : 0);
            foreach (var (xs, ys) in training)
                ChartKit.AddLine(plot, xs, ys, color, LinePattern.Dashed, 1.6f * scale.Factor, shape, stride == 1 ? markerSize * 0.65f : 0);
            if (stride > 1)
            {
                int offset = rank * stride / ranked.Count;
                var points = heldOut.SelectMany(p => p.Xs.Zip(p.Ys)).Where((_, i) => i % stride == offset).ToList();
                ChartKit.AddLine(plot, [.. points.Select(p => p.First)], [.. points.Select(p => p.Second)], color, LinePattern.Solid, 0, shape, markerSize);
            }

            // A ring around the held-out point at the first and last epoch of each span where a finding names this
            // feature: a span reads as its two ends, however many epochs it covers.
            string name = history.FeatureNames[feature];
            var shareAt = attributed.ToDictionary(e => e.Epoch, e => e.HeldOutShare[feature]);
            var ends = ChartKit.Spans(history, e => e.Findings.Any(f => f.Feature == name))
                .SelectMany(span => span.First == span.Last ? new[] { span.First } : [span.First, span.Last])
                .Where(epoch => shareAt.TryGetValue(epoch, out double share) && double.IsFinite(share))
                .ToList();
            if (ends.Count > 0)
            {
                double[] ringXs = [.. ends.Select(e => (double)e)];
                double[] ringYs = [.. ends.Select(e => shareAt[e] * 100)];
                var marks = plot.Add.Markers(ringXs, ringYs, MarkerShape.OpenCircle, 17 * scale.Factor, ChartPalette.Ink);
                marks.MarkerLineWidth = 1.6f * scale.Factor;
                flagged = true;
            }

            legend.ManualItems.Add(new LegendItem
            {
                LabelText = DisplayText.Clean(name, ChartKit.LegendNameLength),
                LineColor = color,
                LineWidth = 2.2f * scale.Factor,
                MarkerShape = shape,
                MarkerColor = color,
                MarkerSize = markerSize,
            });
        }
        double highest = drawn.Where(double.IsFinite).DefaultIfEmpty(0).Max();
        plot.Axes.SetLimitsY(0, highest <= 0 ? 1 : highest * 1.08);

        legend.ManualItems.Add(ChartKit.LineItem("held-out half", ChartPalette.Muted, LinePattern.Solid, 2.2f * scale.Factor));
        legend.ManualItems.Add(ChartKit.LineItem("training half", ChartPalette.Muted, LinePattern.Dashed, 1.6f * scale.Factor));
        if (banded)
            legend.ManualItems.Add(ChartKit.FillItem("noise floor (90% band)", ChartPalette.Muted.WithAlpha(0.25)));
        if (flagged)
            legend.ManualItems.Add(ChartKit.MarkerItem("a finding names it: first and last epoch", ChartPalette.Ink, MarkerShape.OpenCircle, 13 * scale.Factor));
    }

    private static void DrawLosses(Plot plot, Legend legend, RunHistory history, TextScale scale)
    {
        var train = ChartKit.Segments(history.Epochs, e => e.TrainLoss);
        var validation = ChartKit.Segments(history.Epochs, e => e.ValidationLoss);
        var all = train.Concat(validation).SelectMany(p => p.Ys).ToList();
        if (all.Count == 0)
        {
            bool recorded = history.Epochs.Any(e => e.TrainLoss is not null || e.ValidationLoss is not null);
            ChartKit.Note(plot, (history.Epochs[0].Epoch + (double)history.Epochs[^1].Epoch) / 2, recorded ? "no loss that can be drawn (see the title)" : "no losses recorded for this run", scale);
            return;
        }
        float markerSize = history.Epochs.Length <= MarkEveryPointUpTo ? 6 * scale.Factor : 0;
        float width = 2.2f * scale.Factor;
        var trainColor = ChartPalette.Categorical[0];
        var validationColor = ChartPalette.Categorical[1];
        foreach (var (xs, ys) in train)
            ChartKit.AddLine(plot, xs, ys, trainColor, LinePattern.Solid, width, MarkerShape.FilledCircle, markerSize);
        foreach (var (xs, ys) in validation)
            ChartKit.AddLine(plot, xs, ys, validationColor, LinePattern.Dashed, width, MarkerShape.FilledSquare, markerSize);
        if (train.Count > 0)
            legend.ManualItems.Add(ChartKit.LineItem("train loss", trainColor, LinePattern.Solid, width, MarkerShape.FilledCircle, markerSize));
        if (validation.Count > 0)
            legend.ManualItems.Add(ChartKit.LineItem("validation loss", validationColor, LinePattern.Dashed, width, MarkerShape.FilledSquare, markerSize));

        double low = all.Min();
        double high = all.Max();
        double pad = high > low ? (high - low) * 0.08 : Math.Max(Math.Abs(high) * 0.1, 0.05);
        plot.Axes.SetLimitsY(Math.Min(0, low - pad), high + pad);
    }
}
