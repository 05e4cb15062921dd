using System.Globalization;
using DriftWatch.Detection;
using ScottPlot;
using ScottPlot.TickGenerators;
using SkiaSharp;

namespace DriftWatch.Charts;

/// <summary>
/// Share of importance per feature across epochs for the top features, held-out half solid and training half dashed,
/// above an aligned panel of train and validation loss; epochs with a Caution or Halt verdict are marked on both.
/// Each panel's legend stands to its right.
/// </summary>
public sealed class TrendChart : IChart
{
    /// <summary>Features drawn when no number is given.</summary>
    public const int DefaultTopFeatures = 8;

    /// <summary>The most features one chart draws; more lines than this cannot be told apart.</summary>
    public const int MaximumTopFeatures = 20;

    private const int LegendNameLength = 34;

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
        ArgumentNullException.ThrowIfNull(history);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        if (history.Epochs.IsEmpty)
            throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no complete epochs yet; nothing to chart");
        ChartFonts.EnsureRegistered();

        var scale = new TextScale(size);
        var shares = new Plot();
        var losses = new Plot();
        // Hosts of the two legends, one beside each panel; never rendered as plots.
        var sharesKey = new Plot();
        var lossesKey = new Plot();
        StyleLegend(sharesKey.Legend, scale);
        StyleLegend(lossesKey.Legend, scale);

        var last = history.LastAttributed;
        var ranked = last?.TopByHeldOutShare(TopFeatures) ?? [];
        DrawShares(shares, sharesKey.Legend, history, ranked, scale);
        DrawLosses(losses, lossesKey.Legend, history, scale);
        MarkVerdicts(shares, history, scale, legend: null);
        MarkVerdicts(losses, history, scale, lossesKey.Legend);

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

        using var paint = Paint.NewDisposablePaint();
        float gap = 12 * scale.Factor;
        // The legends stack in a column right of the panels; the feature legend gets the height the loss legend
        // leaves and wraps into more columns if it needs more.
        var lossesKeyRect = Measure(lossesKey.Legend, new PixelSize(size.Width / 2f, size.Height - 2 * gap), paint);
        var sharesKeyRect = Measure(sharesKey.Legend, new PixelSize(size.Width / 2f, size.Height - 5 * gap - lossesKeyRect.Height), paint);
        float keyWidth = Math.Max(sharesKeyRect.Width, lossesKeyRect.Width) + 2 * gap;
        float panelWidth = size.Width - keyWidth;
        float left = 90 * scale.Factor;
        float right = 14 * scale.Factor;

        // ScottPlot centres the title over the data area, so a line may overhang it by the narrower margin on each side.
        float dataWidth = panelWidth - left - right;
        var title = Wrap(Title(history, last, ranked.Length), scale.Title, dataWidth + 2 * Math.Min(left, right));
        shares.Title(string.Join('\n', title), scale.Title);
        float titleHeight = title.Count * scale.Title * 1.3f + 22 * scale.Factor;

        // Same left and right padding on both panels, so their data areas, and so their epochs, line up exactly.
        float split = MathF.Round(size.Height * 2 / 3f);
        shares.Layout.Fixed(new PixelPadding(left, right, 34 * scale.Factor, titleHeight));
        losses.Layout.Fixed(new PixelPadding(left, right, 62 * scale.Factor, 14 * scale.Factor));

        using var surface = Surface(size.Width, size.Height);
        surface.Canvas.Clear(SKColors.White);
        // Each panel renders on its own surface: a plot clears the whole canvas it is given.
        DrawPanel(surface.Canvas, shares, 0, (int)panelWidth, (int)split);
        DrawPanel(surface.Canvas, losses, split, (int)panelWidth, size.Height - (int)split);
        // The feature legend at the top, level with the title; the loss legend level with its panel, lower if the
        // feature legend reaches past the split, but never off the picture.
        float sharesKeyTop = gap;
        float lossesKeyTop = Math.Min(
            Math.Max(split + 14 * scale.Factor - gap, sharesKeyTop + sharesKeyRect.Height + 2 * gap),
            size.Height - lossesKeyRect.Height - 2 * gap);
        if (sharesKey.Legend.ManualItems.Count > 0)
            sharesKey.Legend.Render(surface.Canvas, paint, new PixelRect(new Pixel(panelWidth, sharesKeyTop), keyWidth, sharesKeyRect.Height + 2 * gap), Alignment.UpperLeft);
        if (lossesKey.Legend.ManualItems.Count > 0)
            lossesKey.Legend.Render(surface.Canvas, paint, new PixelRect(new Pixel(panelWidth, lossesKeyTop), keyWidth, lossesKeyRect.Height + 2 * gap), Alignment.UpperLeft);

        string? folder = Path.GetDirectoryName(Path.GetFullPath(path));
        if (folder is not null)
            Directory.CreateDirectory(folder);
        using var image = surface.Snapshot();
        using var png = image.Encode(SKEncodedImageFormat.Png, 100);
        using var file = File.Create(path);
        png.SaveTo(file);
    }

    // ScottPlot cannot lay out a legend without items; such a legend takes no room and is not drawn.
    private static PixelRect Measure(Legend legend, PixelSize room, Paint paint) =>
        legend.ManualItems.Count == 0 ? new PixelRect(0, 0) : legend.GetLayout(room, paint).LegendRect;

    private static SKSurface Surface(int width, int height) =>
        SKSurface.Create(new SKImageInfo(width, height, SKColorType.Rgba8888, SKAlphaType.Premul))
            ?? throw new InvalidOperationException($"SkiaSharp could not create a {width}×{height} surface");

    private static void DrawPanel(SKCanvas canvas, Plot plot, float top, int width, int height)
    {
        using var surface = Surface(width, height);
        plot.Render(surface);
        using var image = surface.Snapshot();
        canvas.DrawImage(image, 0, top);
    }

    private static string[] Title(RunHistory history, EpochRecord? last, int drawn)
    {
        string run = DisplayText.Clean(history.RunName, 60);
        string head = $"Run “{run}”: share of importance per feature ({DisplayText.Clean(history.Method, 40)})";
        string detail = last is null
            ? "no attribution maps stored for this method"
            : drawn == history.FeatureNames.Length
                ? $"all {drawn} features, ranked by held-out share at epoch {last.Epoch.ToString(CultureInfo.InvariantCulture)}"
                : $"top {drawn} of {history.FeatureNames.Length} features, ranked by held-out share at epoch {last.Epoch.ToString(CultureInfo.InvariantCulture)}";
        return [head, detail];
    }

    // Breaks each line at spaces so none is wider than the room given.
    private static List<string> Wrap(IEnumerable<string> lines, float fontSize, float width)
    {
        using var font = new SKFont(Fonts.GetTypeface(ChartFonts.FamilyName, false, false), fontSize);
        var wrapped = new List<string>();
        foreach (string line in lines)
        {
            string current = "";
            foreach (string word in line.Split(' '))
            {
                string candidate = current.Length == 0 ? word : current + " " + word;
                if (current.Length > 0 && font.MeasureText(candidate) > width)
                {
                    wrapped.Add(current);
                    current = word;
                }
                else
                {
                    current = candidate;
                }
            }
            wrapped.Add(current);
        }
        return wrapped;
    }

    private static void DrawShares(Plot plot, Legend legend, RunHistory history, IReadOnlyList<int> ranked, TextScale scale)
    {
        var attributed = history.Epochs.Where(e => e.IsAttributed).ToList();
        if (attributed.Count == 0)
        {
            Note(plot, history, $"no attribution maps stored for method {DisplayText.Clean(history.Method, 40)}", scale);
            return;
        }

        // Markers tell lines apart beyond colour. On many epochs a marker at every point would merge into a
        // thick band, so only every stride-th point gets one, staggered per feature so they do not pile up.
        int stride = attributed.Count <= MarkEveryPointUpTo ? 1 : (int)Math.Ceiling(attributed.Count / (double)MarkersPerLine);
        float markerSize = 7 * scale.Factor;
        double highest = 0;
        for (int rank = 0; rank < ranked.Count; rank++)
        {
            int feature = ranked[rank];
            var color = ChartPalette.Line(rank);
            var shape = ChartPalette.Marker(rank);
            var heldOut = Segments(attributed, e => e.HeldOutShare[feature] * 100);
            var training = Segments(attributed, e => e.TrainingShare[feature] * 100);
            highest = Math.Max(highest, heldOut.Concat(training).SelectMany(p => p.Ys).DefaultIfEmpty(0).Max());

            foreach (var (xs, ys) in heldOut)
                AddLine(plot, xs, ys, color, LinePattern.Solid, 2.2f * scale.Factor, shape, stride == 1 ? markerSize : 0);
            foreach (var (xs, ys) in training)
                AddLine(plot, xs, ys, color, LinePattern.Dashed, 1.6f * scale.Factor, shape, stride == 1 ? markerSize * 0.65f : 0);
            if (stride > 1)
            {
                int offset = rank * stride / ranked.Count;
                var points = heldOut.SelectMany(p => p.Xs.Zip(p.Ys)).Where((_, i) => i % stride == offset).ToList();
                AddLine(plot, [.. points.Select(p => p.First)], [.. points.Select(p => p.Second)], color, LinePattern.Solid, 0, shape, markerSize);
            }

            legend.ManualItems.Add(new LegendItem
            {
                LabelText = DisplayText.Clean(history.FeatureNames[feature], LegendNameLength),
                LineColor = color,
                LineWidth = 2.2f * scale.Factor,
                MarkerShape = shape,
                MarkerColor = color,
                MarkerSize = markerSize,
            });
        }
        plot.Axes.SetLimitsY(0, highest <= 0 ? 1 : highest * 1.08);

        legend.ManualItems.Add(LineItem("held-out half", ChartPalette.Muted, LinePattern.Solid, 2.2f * scale.Factor));
        legend.ManualItems.Add(LineItem("training half", ChartPalette.Muted, LinePattern.Dashed, 1.6f * scale.Factor));
    }

    private static void DrawLosses(Plot plot, Legend legend, RunHistory history, TextScale scale)
    {
        var train = Segments(history.Epochs, e => e.TrainLoss);
        var validation = Segments(history.Epochs, e => e.ValidationLoss);
        var all = train.Concat(validation).SelectMany(p => p.Ys).ToList();
        if (all.Count == 0)
        {
            Note(plot, history, "no losses recorded for this run", scale);
            return;
        }
        float markerSize = history.Epochs.Length <= MarkEveryPointUpTo ? 6 * scale.Factor : 0;
        float width = 2.2f * scale.Factor;
        var trainColor = ChartPalette.Categorical[0];
        var validationColor = ChartPalette.Categorical[1];
        foreach (var (xs, ys) in train)
            AddLine(plot, xs, ys, trainColor, LinePattern.Solid, width, MarkerShape.FilledCircle, markerSize);
        foreach (var (xs, ys) in validation)
            AddLine(plot, xs, ys, validationColor, LinePattern.Dashed, width, MarkerShape.FilledSquare, markerSize);
        if (train.Count > 0)
            legend.ManualItems.Add(LineItem("train loss", trainColor, LinePattern.Solid, width, MarkerShape.FilledCircle, markerSize));
        if (validation.Count > 0)
            legend.ManualItems.Add(LineItem("validation loss", validationColor, LinePattern.Dashed, width, MarkerShape.FilledSquare, markerSize));

        double low = all.Min();
        double high = all.Max();
        double pad = high > low ? (high - low) * 0.08 : Math.Max(Math.Abs(high) * 0.1, 0.05);
        plot.Axes.SetLimitsY(Math.Min(0, low - pad), high + pad);
    }

    private static void MarkVerdicts(Plot plot, RunHistory history, TextScale scale, Legend? legend)
    {
        float cautionWidth = 1.5f * scale.Factor;
        float haltWidth = 2.5f * scale.Factor;
        bool caution = false;
        bool halt = false;
        foreach (var epoch in history.Epochs)
        {
            if (epoch.Verdict is not (VerdictKind.Caution or VerdictKind.Halt))
                continue;
            bool isHalt = epoch.Verdict == VerdictKind.Halt;
            var line = plot.Add.VerticalLine(epoch.Epoch);
            line.LinePattern = isHalt ? LinePattern.Solid : LinePattern.Dotted;
            line.LineWidth = isHalt ? haltWidth : cautionWidth;
            line.Color = isHalt ? ChartPalette.Ink : ChartPalette.Muted;
            line.ExcludeFromLegend = true;
            caution |= !isHalt;
            halt |= isHalt;
        }
        if (legend is null)
            return;
        if (caution)
            legend.ManualItems.Add(LineItem("Caution verdict", ChartPalette.Muted, LinePattern.Dotted, cautionWidth));
        if (halt)
            legend.ManualItems.Add(LineItem("Halt verdict", ChartPalette.Ink, LinePattern.Solid, haltWidth));
    }

    private static void AddLine(Plot plot, double[] xs, double[] ys, Color color, LinePattern pattern, float width, MarkerShape marker, float markerSize)
    {
        var line = plot.Add.Scatter(xs, ys, color);
        line.LineWidth = width;
        line.LinePattern = pattern;
        line.MarkerShape = marker;
        line.MarkerSize = markerSize;
    }

    private static LegendItem LineItem(string label, Color color, LinePattern pattern, float width, MarkerShape marker = MarkerShape.None, float markerSize = 0) => new()
    {
        LabelText = label,
        LineColor = color,
        LinePattern = pattern,
        LineWidth = width,
        MarkerShape = marker,
        MarkerColor = color,
        MarkerSize = markerSize,
    };

    private static void Note(Plot plot, RunHistory history, string text, TextScale scale)
    {
        double middle = (history.Epochs[0].Epoch + history.Epochs[^1].Epoch) / 2.0;
        var note = plot.Add.Text(text, middle, 0.5);
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
        plot.HideLegend();
    }

    private static void StyleLegend(Legend legend, TextScale scale)
    {
        legend.IsVisible = true;
        legend.FontSize = scale.Legend;
        legend.FontName = ChartFonts.FamilyName;
        legend.SetBestFontOnEachRender = false;
        legend.SymbolWidth = 36 * scale.Factor;
        legend.DisplayPlottableLegendItems = false;
    }

    // Consecutive points of a line. A missing value (null) is skipped and the line goes on; a NaN or infinite
    // value breaks the line, so a bad epoch shows as a gap instead of a straight line across it.
    private static List<(double[] Xs, double[] Ys)> Segments(IEnumerable<EpochRecord> epochs, Func<EpochRecord, double?> value)
    {
        var segments = new List<(double[] Xs, double[] Ys)>();
        var xs = new List<double>();
        var ys = new List<double>();
        void Close()
        {
            if (xs.Count > 0)
                segments.Add(([.. xs], [.. ys]));
            xs.Clear();
            ys.Clear();
        }
        foreach (var epoch in epochs)
        {
            if (value(epoch) is not double y)
                continue;
            if (!double.IsFinite(y))
            {
                Close();
                continue;
            }
            xs.Add(epoch.Epoch);
            ys.Add(y);
        }
        Close();
        return segments;
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
