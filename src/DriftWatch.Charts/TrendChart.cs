using System.Globalization;
using DriftWatch.Detection;
using ScottPlot;
using ScottPlot.MultiplotLayouts;
using ScottPlot.TickGenerators;

namespace DriftWatch.Charts;

/// <summary>
/// Share of importance per feature across epochs for the top features, held-out half solid and training half dashed,
/// above an aligned panel of train and validation loss; epochs with a Caution or Halt verdict are marked on both.
/// </summary>
public sealed class TrendChart : IChart
{
    /// <summary>Features drawn when no number is given.</summary>
    public const int DefaultTopFeatures = 8;

    /// <summary>The most features one chart draws; more lines than this cannot be told apart.</summary>
    public const int MaximumTopFeatures = 20;

    private const int LegendNameLength = 34;

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
        ArgumentNullException.ThrowIfNull(history);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        if (history.Epochs.IsEmpty)
            throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no complete epochs yet; nothing to chart");
        ChartFonts.EnsureRegistered();

        var scale = new TextScale(size);
        var shares = new Plot();
        var losses = new Plot();
        var last = history.LastAttributed;
        var ranked = last?.TopByHeldOutShare(TopFeatures) ?? [];

        DrawShares(shares, history, ranked, scale);
        DrawLosses(losses, history, scale);
        MarkVerdicts(shares, history, withLegend: true);
        MarkVerdicts(losses, history, withLegend: false);

        shares.Title(Title(history, last, ranked.Length), scale.Title);
        shares.YLabel("share of mean |attribution| (%)", scale.AxisLabel);
        losses.YLabel("loss", scale.AxisLabel);
        losses.XLabel("epoch", scale.AxisLabel);

        double first = history.Epochs[0].Epoch;
        double end = history.Epochs[^1].Epoch;
        foreach (var plot in new[] { shares, losses })
        {
            Style(plot, scale);
            plot.Axes.SetLimitsX(first - 0.5, end + 0.5);
        }

        // Fixed padding on both panels so their data areas, and so their epochs, line up exactly.
        float legendWidth = LegendWidth(shares, losses, size);
        float left = 90 * scale.Factor;
        shares.Layout.Fixed(new PixelPadding(left, legendWidth, 34 * scale.Factor, 78 * scale.Factor));
        losses.Layout.Fixed(new PixelPadding(left, legendWidth, 62 * scale.Factor, 14 * scale.Factor));

        var multiplot = new Multiplot(shares);
        multiplot.AddPlot(losses);
        var layout = new CustomGrid();
        layout.Set(shares, new GridCell(0, 0, 3, 1, 2, 1));
        layout.Set(losses, new GridCell(2, 0, 3, 1, 1, 1));
        multiplot.Layout = layout;

        string? folder = Path.GetDirectoryName(Path.GetFullPath(path));
        if (folder is not null)
            Directory.CreateDirectory(folder);
        multiplot.SavePng(path, size.Width, size.Height);
    }

    private static string Title(RunHistory history, EpochRecord? last, int drawn)
    {
        string run = DisplayText.Clean(history.RunName, 60);
        string head = $"Run “{run}”: share of importance per feature ({DisplayText.Clean(history.Method, 40)})";
        string detail = last is null
            ? "no attribution maps stored for this method"
            : drawn == history.FeatureNames.Length
                ? $"all {drawn} features, ranked by held-out share at epoch {last.Epoch.ToString(CultureInfo.InvariantCulture)}"
                : $"top {drawn} of {history.FeatureNames.Length} features, ranked by held-out share at epoch {last.Epoch.ToString(CultureInfo.InvariantCulture)}";
        return head + "\n" + detail;
    }

    private static void DrawShares(Plot plot, RunHistory history, IReadOnlyList<int> ranked, TextScale scale)
    {
        var attributed = history.Epochs.Where(e => e.IsAttributed).ToList();
        if (attributed.Count == 0)
        {
            Note(plot, $"no attribution maps stored for method {DisplayText.Clean(history.Method, 40)}", scale);
            return;
        }
        double highest = 0;
        for (int rank = 0; rank < ranked.Count; rank++)
        {
            int feature = ranked[rank];
            var color = ChartPalette.Line(rank);
            var heldOut = Points(attributed, e => e.HeldOutShare[feature] * 100);
            var training = Points(attributed, e => e.TrainingShare[feature] * 100);
            highest = Math.Max(highest, Math.Max(heldOut.Ys.DefaultIfEmpty(0).Max(), training.Ys.DefaultIfEmpty(0).Max()));

            var solid = plot.Add.Scatter(heldOut.Xs, heldOut.Ys, color);
            solid.LineWidth = 2.2f * scale.Factor;
            solid.MarkerShape = ChartPalette.Marker(rank);
            solid.MarkerSize = 7 * scale.Factor;
            solid.LegendText = DisplayText.Clean(history.FeatureNames[feature], LegendNameLength);

            var dashed = plot.Add.Scatter(training.Xs, training.Ys, color);
            dashed.LineWidth = 1.6f * scale.Factor;
            dashed.LinePattern = LinePattern.Dashed;
            dashed.MarkerShape = ChartPalette.Marker(rank);
            dashed.MarkerSize = 4.5f * scale.Factor;
        }
        plot.Axes.SetLimitsY(0, highest <= 0 ? 1 : highest * 1.08);

        plot.Legend.ManualItems.Add(StyleItem("held-out half", LinePattern.Solid, scale));
        plot.Legend.ManualItems.Add(StyleItem("training half", LinePattern.Dashed, scale));
    }

    private static void DrawLosses(Plot plot, RunHistory history, TextScale scale)
    {
        var train = Points(history.Epochs, e => e.TrainLoss ?? double.NaN);
        var validation = Points(history.Epochs, e => e.ValidationLoss ?? double.NaN);
        if (train.Xs.Length == 0 && validation.Xs.Length == 0)
        {
            Note(plot, "no losses recorded for this run", scale);
            return;
        }
        if (train.Xs.Length > 0)
        {
            var line = plot.Add.Scatter(train.Xs, train.Ys, ChartPalette.Categorical[0]);
            line.LineWidth = 2.2f * scale.Factor;
            line.MarkerShape = MarkerShape.FilledCircle;
            line.MarkerSize = 6 * scale.Factor;
            line.LegendText = "train loss";
        }
        if (validation.Xs.Length > 0)
        {
            var line = plot.Add.Scatter(validation.Xs, validation.Ys, ChartPalette.Categorical[1]);
            line.LineWidth = 2.2f * scale.Factor;
            line.LinePattern = LinePattern.Dashed;
            line.MarkerShape = MarkerShape.FilledSquare;
            line.MarkerSize = 6 * scale.Factor;
            line.LegendText = "validation loss";
        }
        double low = Math.Min(train.Ys.DefaultIfEmpty(double.MaxValue).Min(), validation.Ys.DefaultIfEmpty(double.MaxValue).Min());
        double high = Math.Max(train.Ys.DefaultIfEmpty(double.MinValue).Max(), validation.Ys.DefaultIfEmpty(double.MinValue).Max());
        double pad = high > low ? (high - low) * 0.08 : Math.Max(Math.Abs(high) * 0.1, 0.05);
        plot.Axes.SetLimitsY(Math.Min(0, low - pad), high + pad);
    }

    private static void MarkVerdicts(Plot plot, RunHistory history, bool withLegend)
    {
        bool caution = false;
        bool halt = false;
        foreach (var epoch in history.Epochs)
        {
            if (epoch.Verdict is not (VerdictKind.Caution or VerdictKind.Halt))
                continue;
            bool isHalt = epoch.Verdict == VerdictKind.Halt;
            var line = plot.Add.VerticalLine(epoch.Epoch);
            line.LinePattern = isHalt ? LinePattern.Solid : LinePattern.Dotted;
            line.LineWidth = isHalt ? 2.5f : 1.5f;
            line.Color = isHalt ? ChartPalette.Ink : ChartPalette.Muted;
            line.ExcludeFromLegend = true;
            caution |= !isHalt;
            halt |= isHalt;
        }
        if (!withLegend)
            return;
        if (caution)
            plot.Legend.ManualItems.Add(new LegendItem { LabelText = "Caution verdict", LineColor = ChartPalette.Muted, LinePattern = LinePattern.Dotted, LineWidth = 1.5f });
        if (halt)
            plot.Legend.ManualItems.Add(new LegendItem { LabelText = "Halt verdict", LineColor = ChartPalette.Ink, LinePattern = LinePattern.Solid, LineWidth = 2.5f });
    }

    private static LegendItem StyleItem(string label, LinePattern pattern, TextScale scale) => new()
    {
        LabelText = label,
        LineColor = ChartPalette.Muted,
        LinePattern = pattern,
        LineWidth = 2 * scale.Factor,
    };

    private static void Note(Plot plot, string text, TextScale scale)
    {
        var note = plot.Add.Text(text, 0.5, 0.5);
        note.LabelFontSize = scale.AxisLabel;
        note.LabelFontColor = ChartPalette.Muted;
        note.LabelAlignment = Alignment.MiddleCenter;
        plot.Axes.SetLimitsY(0, 1);
    }

    private static void Style(Plot plot, TextScale scale)
    {
        plot.Font.Set(ChartFonts.FamilyName);
        plot.Axes.Title.Label.FontSize = scale.Title;
        plot.Axes.Bottom.TickLabelStyle.FontSize = scale.Tick;
        plot.Axes.Left.TickLabelStyle.FontSize = scale.Tick;
        plot.Axes.Bottom.TickGenerator = new NumericAutomatic { IntegerTicksOnly = true };
        plot.Axes.Bottom.MinorTickStyle.Length = 0;
        plot.Legend.FontSize = scale.Legend;
        plot.Legend.FontName = ChartFonts.FamilyName;
        plot.Legend.SetBestFontOnEachRender = false;
        plot.Legend.SymbolWidth = 36 * scale.Factor;
        plot.ShowLegend(Edge.Right);
    }

    // The legends sit in the right padding; ScottPlot's own legend layout says how wide they will be.
    private static float LegendWidth(Plot shares, Plot losses, ChartSize size)
    {
        using var paint = Paint.NewDisposablePaint();
        float widest = 0;
        foreach (var legend in new[] { shares.Legend, losses.Legend })
        {
            var layout = legend.GetLayout(new PixelSize(size.Width, size.Height), paint);
            widest = Math.Max(widest, layout.LegendRect.Width + legend.Margin.Horizontal);
        }
        // Plus the empty right axis between data area and legend, and a little air on the far side.
        return widest + 48;
    }

    private static (double[] Xs, double[] Ys) Points(IEnumerable<EpochRecord> epochs, Func<EpochRecord, double> value)
    {
        var xs = new List<double>();
        var ys = new List<double>();
        foreach (var epoch in epochs)
        {
            double y = value(epoch);
            if (!double.IsFinite(y))
                continue;
            xs.Add(epoch.Epoch);
            ys.Add(y);
        }
        return ([.. xs], [.. ys]);
    }

    // Text sizes grow with the picture, so a larger render is not just smaller text on more pixels.
    private readonly record struct TextScale
    {
        public TextScale(ChartSize size) =>
            Factor = (float)Math.Clamp(Math.Min(size.Width / 1200.0, size.Height / 700.0), 0.75, 3.0);

        public float Factor { get; }

        public float Title => 18 * Factor;

        public float AxisLabel => 15 * Factor;

        public float Tick => 13 * Factor;

        public float Legend => 13 * Factor;
    }
}
