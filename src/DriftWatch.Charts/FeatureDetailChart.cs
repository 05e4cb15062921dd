using DriftWatch.Detection;
using ScottPlot;

namespace DriftWatch.Charts;

/// <summary>
/// The per-row distribution of one feature's attributions across epochs: at each epoch a box plot for the held-out half
/// and one for the training half (quartiles, median, whiskers to the furthest row within 1.5 IQR, rows beyond as dots).
/// </summary>
/// <remarks>Load the history with this feature in <c>rowsOf</c> (<see cref="RunHistory.Load"/>); only then are per-row scores kept.</remarks>
public sealed class FeatureDetailChart : IChart
{
    /// <summary>The most epochs drawn; longer runs show evenly spaced epochs, always the first and last.</summary>
    public const int MaximumEpochs = 40;

    /// <summary>Creates the chart for the feature called <paramref name="feature"/>.</summary>
    public FeatureDetailChart(string feature)
    {
        ArgumentNullException.ThrowIfNull(feature);
        Feature = feature;
    }

    /// <summary>The feature drawn.</summary>
    public string Feature { get; }

    /// <inheritdoc />
    /// <remarks>Includes the feature, so charts of two features never share a file.</remarks>
    public string Name => "feature-" + Feature;

    /// <summary>The epochs drawn out of <paramref name="attributed"/>: all of them up to <see cref="MaximumEpochs"/>, else evenly spaced ones with the first and last.</summary>
    public static IReadOnlyList<int> Thin(IReadOnlyList<int> attributed)
    {
        ArgumentNullException.ThrowIfNull(attributed);
        if (attributed.Count <= MaximumEpochs)
            return attributed;
        return Enumerable.Range(0, MaximumEpochs)
            .Select(i => attributed[(int)Math.Round(i * (attributed.Count - 1) / (double)(MaximumEpochs - 1))])
            .Distinct()
            .ToList();
    }

    /// <inheritdoc />
    /// <exception cref="DriftWatchException">The run has no such feature.</exception>
    /// <exception cref="InvalidOperationException">The history was loaded without this feature's rows.</exception>
    public void Render(RunHistory history, string path, ChartSize size)
    {
        ChartKit.RequireEpochs(history);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        int index = history.FeatureIndex(Feature);
        if (index < 0)
            throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no feature '{DisplayText.Clean(Feature)}'; its features: {DisplayText.Clean(string.Join(", ", history.FeatureNames), 400)}");
        var rows = history.Rows.FirstOrDefault(r => r.FeatureIndex == index)
            ?? throw new InvalidOperationException($"the history of run '{history.RunName}' was loaded without per-row scores of '{Feature}'; pass it in rowsOf");
        ChartFonts.EnsureRegistered();
        var scale = new TextScale(size);
        var plot = ChartKit.NewPlot(scale);
        var key = ChartKit.NewKey(scale);
        var shaded = ChartKit.ShadeVerdicts(plot, history);

        var drawn = Thin(rows.Epochs.Select(e => e.Epoch).ToList()).ToHashSet();
        var epochs = rows.Epochs.Where(e => drawn.Contains(e.Epoch)).ToList();
        int spacing = epochs.Count < 2 ? 1 : Math.Max(1, epochs.Zip(epochs.Skip(1), (a, b) => b.Epoch - a.Epoch).Min());
        var heldOutColor = ChartPalette.HeldOut;
        var trainingColor = ChartPalette.Training;
        var values = new List<double>();
        if (epochs.Count == 0)
        {
            ChartKit.Note(plot, (history.Epochs[0].Epoch + (double)history.Epochs[^1].Epoch) / 2, $"no attribution maps stored for method {DisplayText.Clean(history.Method, 40)}", scale);
        }
        else
        {
            var zero = plot.Add.HorizontalLine(0, 1.2f * scale.Factor, ChartPalette.Zero, LinePattern.Solid);
            zero.ExcludeFromLegend = true;
            double offset = 0.21 * spacing;
            double boxWidth = 0.36 * spacing;
            bool outliers = false;
            foreach (var epoch in epochs)
            {
                outliers |= AddBox(plot, epoch.HeldOut, epoch.Epoch - offset, boxWidth, heldOutColor, scale, values);
                outliers |= AddBox(plot, epoch.Training, epoch.Epoch + offset, boxWidth, trainingColor, scale, values);
            }
            key.Legend.ManualItems.Add(ChartKit.FillItem($"held-out rows ({ChartKit.Integer(history.HeldOutRows)})", heldOutColor.WithAlpha(0.35)));
            key.Legend.ManualItems.Add(ChartKit.FillItem($"training rows ({ChartKit.Integer(history.TrainingRows)})", trainingColor.WithAlpha(0.35)));
            if (outliers)
                key.Legend.ManualItems.Add(ChartKit.MarkerItem("row beyond 1.5 IQR", ChartPalette.Muted, MarkerShape.OpenCircle, 6 * scale.Factor));
        }
        ChartKit.VerdictKey(key.Legend, shaded, history);
        ChartKit.FitY(plot, values, includeZero: true);
        ChartKit.EpochAxis(plot, history);
        if (spacing > 1)
        {
            // Thinned epochs sit further apart than one; leave room for the outer boxes' halves.
            plot.Axes.SetLimitsX(Math.Min(history.Epochs[0].Epoch, epochs[0].Epoch) - 0.5 * spacing, Math.Max(history.Epochs[^1].Epoch, epochs[^1].Epoch) + 0.5 * spacing);
        }
        plot.YLabel($"attribution score ({DisplayText.Clean(history.Target, 20)} units)", scale.AxisLabel);
        plot.XLabel("epoch", scale.AxisLabel);

        bool flagged = history.Epochs.Any(e => e.Findings.Any(f => f.Feature == Feature));
        string[] title =
        [
            $"{ChartKit.RunTitle(history)}: per-row attributions of “{DisplayText.Clean(Feature, 40)}”{(flagged ? " (flagged)" : "")} ({DisplayText.Clean(history.Method, 40)})",
            epochs.Count == rows.Epochs.Length
                ? "a box per half at every attributed epoch: quartiles and median, whiskers to 1.5 IQR"
                : $"a box per half at {ChartKit.Integer(epochs.Count)} of {ChartKit.Integer(rows.Epochs.Length)} attributed epochs, evenly spaced: quartiles and median, whiskers to 1.5 IQR",
        ];
        ChartKit.Compose(path, size, scale, title, [new PanelRow([plot], key, 1, ShowsXLabel: true)]);
    }

    // Tukey's box plot (Tukey 1977, Exploratory Data Analysis): quartiles, median, whiskers to the furthest point within
    // 1.5 IQR of the box, the rest drawn one by one. Adds the values that set the axis; returns whether any row lies beyond.
    private static bool AddBox(Plot plot, IReadOnlyList<float> scores, double position, double width, Color color, TextScale scale, List<double> values)
    {
        var finite = scores.Where(float.IsFinite).Select(s => (double)s).OrderBy(s => s).ToList();
        if (finite.Count == 0)
            return false;
        double q1 = Statistics.Quantile(finite, 0.25);
        double median = Statistics.Quantile(finite, 0.5);
        double q3 = Statistics.Quantile(finite, 0.75);
        double iqr = q3 - q1;
        double low = finite.First(v => v >= q1 - 1.5 * iqr);
        double high = finite.Last(v => v <= q3 + 1.5 * iqr);
        var box = new Box
        {
            Position = position,
            BoxMin = q1,
            BoxMax = q3,
            BoxMiddle = median,
            WhiskerMin = low,
            WhiskerMax = high,
            Width = width,
        };
        box.FillColor = color.WithAlpha(0.35);
        box.LineColor = color;
        box.LineWidth = 1.4f * scale.Factor;
        var added = plot.Add.Box(box);
        added.FillColor = color.WithAlpha(0.35);
        added.LineColor = color;
        added.LineWidth = 1.4f * scale.Factor;
        var outliers = finite.Where(v => v < low || v > high).ToArray();
        if (outliers.Length > 0)
        {
            double[] xs = [.. outliers.Select(_ => position)];
            var dots = plot.Add.Markers(xs, outliers, MarkerShape.OpenCircle, 4 * scale.Factor, color.WithAlpha(0.7));
            dots.MarkerLineWidth = 1;
        }
        values.Add(low);
        values.Add(high);
        values.AddRange(outliers);
        return outliers.Length > 0;
    }
}
