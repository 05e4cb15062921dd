using ScottPlot;

namespace DriftWatch.Charts.Compare;

/// <summary>
/// Two runs on one picture: the held-out share of the top features at matching epochs (run A solid, run B dashed, one
/// colour per feature), above the Spearman rank correlation between the runs at each matching epoch.
/// </summary>
public sealed class ComparisonChart
{
    /// <summary>Features drawn when no number is given.</summary>
    public const int DefaultTopFeatures = 6;

    /// <summary>Creates the chart.</summary>
    /// <param name="topFeatures">How many features to draw, 1 to <see cref="TrendChart.MaximumTopFeatures"/>.</param>
    /// <exception cref="DriftWatchException"><paramref name="topFeatures"/> is out of range.</exception>
    public ComparisonChart(int topFeatures = DefaultTopFeatures)
    {
        if (topFeatures is < 1 or > TrendChart.MaximumTopFeatures)
            throw new DriftWatchException($"the comparison chart draws between 1 and {TrendChart.MaximumTopFeatures} features; got {topFeatures}");
        TopFeatures = topFeatures;
    }

    /// <summary>How many features are drawn.</summary>
    public int TopFeatures { get; }

    /// <summary>The chart's file name for the two runs.</summary>
    public static string FileName(RunComparison comparison)
    {
        ArgumentNullException.ThrowIfNull(comparison);
        return ChartFiles.FileName(comparison.A.RunName, "vs-" + comparison.B.RunName, comparison.A.Method);
    }

    /// <summary>Renders the comparison to a PNG file at <paramref name="path"/>.</summary>
    /// <exception cref="DriftWatchException">The runs share no attributed epoch or no feature.</exception>
    public void Render(RunComparison comparison, string path, ChartSize size)
    {
        ArgumentNullException.ThrowIfNull(comparison);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        if (comparison.Epochs.IsEmpty)
            throw new DriftWatchException($"runs '{DisplayText.Clean(comparison.A.RunName)}' and '{DisplayText.Clean(comparison.B.RunName)}' have no attributed epoch in common; nothing to compare");
        if (comparison.Features.IsEmpty)
            throw new DriftWatchException($"runs '{DisplayText.Clean(comparison.A.RunName)}' and '{DisplayText.Clean(comparison.B.RunName)}' have no feature in common; nothing to compare");
        ChartFonts.EnsureRegistered();
        var scale = new TextScale(size);
        var shares = ChartKit.NewPlot(scale);
        var shareKey = ChartKit.NewKey(scale);
        var ranks = ChartKit.NewPlot(scale);
        var rankKey = ChartKit.NewKey(scale);
        float width = 2.2f * scale.Factor;
        float marker = comparison.Epochs.Length <= 60 ? 6 * scale.Factor : 0;
        double[] xs = [.. comparison.Epochs.Select(e => (double)e.Epoch)];

        var top = comparison.TopFeatures(TopFeatures);
        var drawn = new List<double>();
        for (int rank = 0; rank < top.Count; rank++)
        {
            int f = top[rank];
            var color = ChartPalette.Line(rank);
            var shape = ChartPalette.Marker(rank);
            double[] a = [.. comparison.Epochs.Select(e => e.SharesA[f] * 100)];
            double[] b = [.. comparison.Epochs.Select(e => e.SharesB[f] * 100)];
            ChartKit.AddLine(shares, xs, a, color, LinePattern.Solid, width, shape, marker);
            ChartKit.AddLine(shares, xs, b, color, LinePattern.Dashed, width * 0.75f, shape, marker * 0.65f);
            drawn.AddRange(a);
            drawn.AddRange(b);
            shareKey.Legend.ManualItems.Add(ChartKit.LineItem(DisplayText.Clean(comparison.Features[f], ChartKit.LegendNameLength), color, LinePattern.Solid, width, shape, marker));
        }
        shareKey.Legend.ManualItems.Add(ChartKit.LineItem("A: " + DisplayText.Clean(comparison.A.RunName, 30), ChartPalette.Muted, LinePattern.Solid, width));
        shareKey.Legend.ManualItems.Add(ChartKit.LineItem("B: " + DisplayText.Clean(comparison.B.RunName, 30), ChartPalette.Muted, LinePattern.Dashed, width * 0.75f));
        ChartKit.FitY(shares, drawn, floor: 0, includeZero: true);
        shares.YLabel("held-out share (%)", scale.AxisLabel);

        var one = ranks.Add.HorizontalLine(1, 1, ChartPalette.Zero, LinePattern.Solid);
        one.ExcludeFromLegend = true;
        var matching = comparison.Epochs.ToDictionary(e => e.Epoch);
        var epochs = comparison.A.Epochs.Where(e => matching.ContainsKey(e.Epoch)).ToList();
        var heldOut = ChartKit.Segments(epochs, e => matching[e.Epoch].HeldOutSpearman);
        var training = ChartKit.Segments(epochs, e => matching[e.Epoch].TrainingSpearman);
        foreach (var (x, y) in heldOut)
            ChartKit.AddLine(ranks, x, y, ChartPalette.HeldOut, LinePattern.Solid, width, MarkerShape.FilledCircle, marker);
        foreach (var (x, y) in training)
            ChartKit.AddLine(ranks, x, y, ChartPalette.Training, LinePattern.Dashed, width, MarkerShape.FilledSquare, marker);
        rankKey.Legend.ManualItems.Add(ChartKit.LineItem("held-out half", ChartPalette.HeldOut, LinePattern.Solid, width, MarkerShape.FilledCircle, marker));
        rankKey.Legend.ManualItems.Add(ChartKit.LineItem("training half", ChartPalette.Training, LinePattern.Dashed, width, MarkerShape.FilledSquare, marker));
        ChartKit.FitY(ranks, heldOut.Concat(training).SelectMany(p => p.Ys).Append(1), floor: -1.05, ceiling: 1.05);
        ranks.YLabel("Spearman ρ, A vs B", scale.AxisLabel);
        ranks.XLabel("epoch", scale.AxisLabel);
        foreach (var plot in new[] { shares, ranks })
            plot.Axes.SetLimitsX(xs[0] - 0.5, xs[^1] + 0.5);

        string[] title =
        [
            $"Run “{DisplayText.Clean(comparison.A.RunName, 40)}” (A) against “{DisplayText.Clean(comparison.B.RunName, 40)}” (B)",
            $"held-out share of the top {ChartKit.Integer(top.Count)} of {ChartKit.Integer(comparison.Features.Length)} common features at {ChartKit.Integer(comparison.Epochs.Length)} matching epochs; rank correlation between the runs beneath",
        ];
        ChartKit.Compose(path, size, scale, title,
        [
            new PanelRow([shares], shareKey, 2, ShowsXLabel: false),
            new PanelRow([ranks], rankKey, 1, ShowsXLabel: true),
        ]);
    }
}
