using System.Globalization;
using DriftWatch.Detection;
using ScottPlot;
using ScottPlot.TickGenerators;
using SkiaSharp;

namespace DriftWatch.Charts;

/// <summary>Text sizes that grow with the picture, so a larger render is not just smaller text on more pixels.</summary>
internal readonly record struct TextScale
{
    /// <summary>Scales text to <paramref name="size"/>, relative to 1200 × 700.</summary>
    public TextScale(ChartSize size) =>
        Factor = (float)Math.Clamp(Math.Min(size.Width / 1200.0, size.Height / 700.0), 0.75, 3.0);

    /// <summary>The factor against the 1200 × 700 reference.</summary>
    public float Factor { get; }

    /// <summary>The chart title.</summary>
    public float Title => 18 * Factor;

    /// <summary>Axis labels.</summary>
    public float AxisLabel => 15 * Factor;

    /// <summary>Tick labels.</summary>
    public float Tick => 13 * Factor;

    /// <summary>Legend text.</summary>
    public float Legend => 13 * Factor;
}

/// <summary>One row of panels in a chart: one plot per column, one legend to the right of the row.</summary>
/// <param name="Columns">The plots, left to right.</param>
/// <param name="Key">A plot used only to host the row's legend, or null for none.</param>
/// <param name="Weight">The row's share of the picture's height, relative to the other rows.</param>
/// <param name="ShowsXLabel">Whether the row's plots carry an x-axis label (needs more room beneath).</param>
/// <param name="TitleLines">Lines of each plot's own title, for the room above it; 0 leaves that to <c>columnTitles</c>.</param>
internal sealed record PanelRow(IReadOnlyList<Plot> Columns, Plot? Key, float Weight, bool ShowsXLabel, int TitleLines = 0);

/// <summary>Drawing helpers every chart shares: the house style, verdict shading, lines broken at NaN, panel layout and PNG output.</summary>
internal static class ChartKit
{
    /// <summary>Legend names longer than this are shortened with an ellipsis.</summary>
    public const int LegendNameLength = 34;

    /// <summary>The first Caution verdict's mark: a thin dotted grey line.</summary>
    public static Color CautionMark { get; } = ChartPalette.Muted;

    /// <summary>The first Halt verdict's mark: a dashed dark line, where stopping on Halt would have ended the run.</summary>
    public static Color HaltMark { get; } = ChartPalette.Ink;

    /// <summary>A new plot in the house style: bundled font, sized ticks, integer epochs, no built-in legend.</summary>
    public static Plot NewPlot(TextScale scale, bool integerX = true)
    {
        var plot = new Plot();
        plot.Font.Set(ChartFonts.FamilyName);
        plot.Axes.Title.Label.FontSize = scale.Title;
        plot.Axes.Bottom.TickLabelStyle.FontSize = scale.Tick;
        plot.Axes.Left.TickLabelStyle.FontSize = scale.Tick;
        plot.Axes.Bottom.Label.FontSize = scale.AxisLabel;
        plot.Axes.Left.Label.FontSize = scale.AxisLabel;
        if (integerX)
            plot.Axes.Bottom.TickGenerator = new NumericAutomatic { IntegerTicksOnly = true };
        plot.Axes.Bottom.MinorTickStyle.Length = 0;
        plot.HideLegend();
        return plot;
    }

    /// <summary>A plot that only hosts a legend beside the panels; never rendered as a plot.</summary>
    public static Plot NewKey(TextScale scale)
    {
        var key = new Plot();
        var legend = key.Legend;
        legend.IsVisible = true;
        legend.FontSize = scale.Legend;
        legend.FontName = ChartFonts.FamilyName;
        legend.SetBestFontOnEachRender = false;
        legend.SymbolWidth = 36 * scale.Factor;
        legend.DisplayPlottableLegendItems = false;
        return key;
    }

    /// <summary>The x range every epoch chart uses: half an epoch beyond the first and last.</summary>
    public static void EpochAxis(Plot plot, RunHistory history)
    {
        plot.Axes.SetLimitsX(history.Epochs[0].Epoch - 0.5, history.Epochs[^1].Epoch + 0.5);
    }

    /// <summary>
    /// Marks the first Caution (when it comes before the first Halt) and the first Halt verdict with a thin vertical line
    /// each: where the gate first worried and where stopping on Halt would have ended the run. Nothing is shaded, so a
    /// long run stays as readable after its first Halt as before it.
    /// </summary>
    /// <returns>Which marks were drawn, for the legend.</returns>
    public static (bool Caution, bool Halt) ShadeVerdicts(Plot plot, RunHistory history)
    {
        var (caution, halt) = FirstVerdicts(history);
        if (caution is int c)
            VerticalMark(plot, c, CautionMark, LinePattern.Dotted, 1.4f);
        if (halt is int h)
            VerticalMark(plot, h, HaltMark, LinePattern.Dashed, 1.8f);
        return (caution is not null, halt is not null);
    }

    /// <summary>The first Caution epoch (only when no Halt came before it) and the first Halt epoch, or null.</summary>
    public static (int? Caution, int? Halt) FirstVerdicts(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        int? halt = history.Epochs.FirstOrDefault(e => e.Verdict == VerdictKind.Halt)?.Epoch;
        int? caution = history.Epochs.FirstOrDefault(e => e.Verdict == VerdictKind.Caution)?.Epoch;
        if (caution is int c && halt is int h && c >= h)
            caution = null;
        return (caution, halt);
    }

    private static void VerticalMark(Plot plot, double x, Color color, LinePattern pattern, float width)
    {
        var line = plot.Add.VerticalLine(x, width, color, pattern);
        line.IsDraggable = false;
        line.ExcludeFromLegend = true;
    }

    /// <summary>Adds legend entries for the verdict marks that were drawn, naming their epochs.</summary>
    public static void VerdictKey(Legend legend, (bool Caution, bool Halt) shaded, RunHistory? history = null)
    {
        var (caution, halt) = history is null ? (null, null) : FirstVerdicts(history);
        string At(int? epoch) => epoch is int e ? $" (epoch {Integer(e)})" : "";
        if (shaded.Caution)
            legend.ManualItems.Add(LineItem("first Caution" + At(caution), CautionMark, LinePattern.Dotted, 1.4f));
        if (shaded.Halt)
            legend.ManualItems.Add(LineItem("first Halt: stopping would end here" + At(halt), HaltMark, LinePattern.Dashed, 1.8f));
    }

    /// <summary>
    /// The spans of consecutive stored epochs where <paramref name="flagged"/> holds, first to last epoch each: finding
    /// marks go at a span's start and end, not at every epoch.
    /// </summary>
    public static List<(int First, int Last)> Spans(RunHistory history, Func<EpochRecord, bool> flagged)
    {
        ArgumentNullException.ThrowIfNull(history);
        ArgumentNullException.ThrowIfNull(flagged);
        var spans = new List<(int First, int Last)>();
        int? first = null;
        int last = 0;
        foreach (var epoch in history.Epochs)
        {
            if (flagged(epoch))
            {
                first ??= epoch.Epoch;
                last = epoch.Epoch;
            }
            else if (first is int f)
            {
                spans.Add((f, last));
                first = null;
            }
        }
        if (first is int open)
            spans.Add((open, last));
        return spans;
    }

    /// <summary>Adds a line with markers.</summary>
    public static ScottPlot.Plottables.Scatter AddLine(Plot plot, double[] xs, double[] ys, Color color, LinePattern pattern, float width, MarkerShape marker, float markerSize)
    {
        var line = plot.Add.Scatter(xs, ys, color);
        line.LineWidth = width;
        line.LinePattern = pattern;
        line.MarkerShape = marker;
        line.MarkerSize = markerSize;
        return line;
    }

    /// <summary>A legend entry for a line.</summary>
    public static LegendItem LineItem(string label, Color color, LinePattern pattern, float width, MarkerShape marker = MarkerShape.None, float markerSize = 0) => new()
    {
        LabelText = label,
        LineColor = color,
        LinePattern = pattern,
        LineWidth = width,
        MarkerShape = marker,
        MarkerColor = color,
        MarkerSize = markerSize,
    };

    /// <summary>A legend entry for a filled area.</summary>
    public static LegendItem FillItem(string label, Color color) => new()
    {
        LabelText = label,
        FillColor = color,
        OutlineColor = color.WithAlpha(0.6),
        OutlineWidth = 1,
    };

    /// <summary>A legend entry for a marker alone.</summary>
    public static LegendItem MarkerItem(string label, Color color, MarkerShape shape, float size) => new()
    {
        LabelText = label,
        LineWidth = 0,
        MarkerShape = shape,
        MarkerColor = color,
        MarkerSize = size,
        MarkerLineWidth = 1.6f,
    };

    /// <summary>
    /// Consecutive points of a series. A missing value (null) is skipped and the line goes on; a NaN or infinite
    /// value, or one beyond ±<see cref="LargestDrawn"/>, breaks the line, so a bad epoch shows as a gap instead of a
    /// straight line across it.
    /// </summary>
    public static List<(double[] Xs, double[] Ys)> Segments(IEnumerable<EpochRecord> epochs, Func<EpochRecord, double?> value)
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
            if (!IsDrawn(y))
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

    /// <summary>
    /// Shades the band <paramref name="band"/> gives per epoch, in pieces where it is known;
    /// a single-epoch piece becomes a short vertical bar so it still shows.
    /// </summary>
    /// <returns>The values drawn, for axis limits.</returns>
    public static List<double> Band(Plot plot, IEnumerable<EpochRecord> epochs, Func<EpochRecord, (double Lower, double Upper)?> band, Color color)
    {
        var drawn = new List<double>();
        var xs = new List<double>();
        var lows = new List<double>();
        var highs = new List<double>();
        void Close()
        {
            if (xs.Count == 1)
            {
                var bar = plot.Add.Rectangle(xs[0] - 0.12, xs[0] + 0.12, lows[0], highs[0]);
                bar.FillColor = color;
                bar.LineWidth = 0;
            }
            else if (xs.Count > 1)
            {
                var fill = plot.Add.FillY([.. xs], [.. lows], [.. highs]);
                fill.FillColor = color;
                fill.LineWidth = 0;
                fill.MarkerSize = 0;
            }
            xs.Clear();
            lows.Clear();
            highs.Clear();
        }
        foreach (var epoch in epochs)
        {
            if (band(epoch) is not var (low, high) || !double.IsFinite(low) || !double.IsFinite(high))
            {
                Close();
                continue;
            }
            xs.Add(epoch.Epoch);
            lows.Add(low);
            highs.Add(high);
            drawn.Add(low);
            drawn.Add(high);
        }
        Close();
        return drawn;
    }

    /// <summary>
    /// The largest magnitude a line is drawn to: 1e300. A value beyond it (a loss that overflowed) is left out like a
    /// NaN, so an axis never has to span more than a double holds.
    /// </summary>
    public const double LargestDrawn = 1e300;

    /// <summary>Whether a line point at <paramref name="value"/> is drawn: finite and within ±<see cref="LargestDrawn"/>.</summary>
    public static bool IsDrawn(double value) => double.IsFinite(value) && Math.Abs(value) <= LargestDrawn;

    /// <summary>How many of <paramref name="values"/> are finite but beyond ±<see cref="LargestDrawn"/>, so <see cref="Segments"/> leaves them out.</summary>
    public static int Undrawn(IEnumerable<double?> values) => values.Count(v => v is double y && double.IsFinite(y) && !IsDrawn(y));

    /// <summary>A title line saying that <paramref name="count"/> <paramref name="what"/> are not drawn, e.g. <c>2 losses beyond ±1e300 are not drawn</c>; null when the count is 0.</summary>
    public static string? UndrawnNote(int count, string what) =>
        count == 0 ? null : $"{Integer(count)} {what} beyond ±1e300 {(count == 1 ? "is" : "are")} not drawn";

    /// <summary>Sets y limits around <paramref name="values"/> with a margin; a flat or empty series gets a sensible range.</summary>
    public static void FitY(Plot plot, IEnumerable<double> values, double? floor = null, double? ceiling = null, bool includeZero = false)
    {
        var finite = values.Where(double.IsFinite).ToList();
        if (includeZero)
            finite.Add(0);
        if (finite.Count == 0)
        {
            plot.Axes.SetLimitsY(floor ?? 0, ceiling ?? 1);
            return;
        }
        double low = finite.Min();
        double high = finite.Max();
        double pad = high > low ? (high - low) * 0.08 : Math.Max(Math.Abs(high) * 0.1, 0.05);
        low -= pad;
        high += pad;
        if (floor is double f)
            low = Math.Max(low, f);
        if (ceiling is double c)
            high = Math.Min(high, c);
        plot.Axes.SetLimitsY(low, high);
    }

    /// <summary>A centred grey note in an empty panel.</summary>
    public static void Note(Plot plot, double x, string text, TextScale scale)
    {
        var note = plot.Add.Text(text, x, 0.5);
        note.LabelFontSize = scale.AxisLabel;
        note.LabelFontColor = ChartPalette.Muted;
        note.LabelAlignment = Alignment.MiddleCenter;
        plot.Axes.SetLimitsY(0, 1);
    }

    /// <summary>The run's name for a title: cleaned, shortened, quoted.</summary>
    public static string RunTitle(RunHistory history) => $"Run “{DisplayText.Clean(history.RunName, 60)}”";

    /// <summary>An integer in invariant culture.</summary>
    public static string Integer(int value) => value.ToString(CultureInfo.InvariantCulture);

    /// <summary>Breaks each line at spaces so none is wider than <paramref name="width"/> pixels.</summary>
    public static List<string> Wrap(IEnumerable<string> lines, float fontSize, float width, bool bold = false)
    {
        using var font = new SKFont(Fonts.GetTypeface(ChartFonts.FamilyName, bold, false), fontSize);
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

    /// <summary>
    /// Lays out rows of panels beneath a title, with each row's legend in a column on the right, and writes the PNG.
    /// Every column of every row gets the same left and right padding, so epochs line up from row to row.
    /// </summary>
    /// <param name="path">The PNG to write.</param>
    /// <param name="size">The picture size.</param>
    /// <param name="scale">Text sizes.</param>
    /// <param name="title">Title lines; wrapped to the panels' width.</param>
    /// <param name="rows">The rows, top to bottom.</param>
    /// <param name="left">Left padding of every panel, at scale 1 (room for tick labels and the y label).</param>
    /// <param name="columnTitles">Whether the top row's plots carry titles of their own (more room above them).</param>
    /// <param name="right">Right padding of every panel, at scale 1 (room for a colour bar).</param>
    public static void Compose(string path, ChartSize size, TextScale scale, IReadOnlyList<string> title, IReadOnlyList<PanelRow> rows, float left = 90, bool columnTitles = false, float right = 14)
    {
        using var paint = Paint.NewDisposablePaint();
        float gap = 12 * scale.Factor;
        var keys = rows.Select(r => r.Key?.Legend).ToArray();

        // Legends first at their natural height; if together they are taller than the picture, each gets its row's height
        // and wraps into more columns.
        var rects = keys.Select(k => Measure(k, new PixelSize(size.Width / 2f, size.Height - 2 * gap), paint)).ToArray();
        float totalWeight = rows.Sum(r => r.Weight);
        if (rects.Sum(r => r.Height + 2 * gap) > size.Height)
        {
            for (int i = 0; i < rows.Count; i++)
                rects[i] = Measure(keys[i], new PixelSize(size.Width / 2f, Math.Max(size.Height * rows[i].Weight / totalWeight - 2 * gap, 40)), paint);
        }
        float keyWidth = rects.Length == 0 || rects.All(r => r.Width == 0) ? gap : rects.Max(r => r.Width) + 2 * gap;
        float panelWidth = size.Width - keyWidth;

        // The first title line in bold, the rest (what the chart shows) smaller and regular.
        using var titleFont = new SKFont(Fonts.GetTypeface(ChartFonts.FamilyName, true, false), scale.Title);
        using var subtitleFont = new SKFont(Fonts.GetTypeface(ChartFonts.FamilyName, false, false), scale.AxisLabel);
        float room = panelWidth - 28 * scale.Factor;
        var titleLines = Wrap(title.Take(1), scale.Title, room, bold: true).Select(l => (Text: l, Font: titleFont, Height: scale.Title * 1.3f))
            .Concat(Wrap(title.Skip(1), scale.AxisLabel, room).Select(l => (Text: l, Font: subtitleFont, Height: scale.AxisLabel * 1.35f)))
            .ToList();
        float titleHeight = titleLines.Sum(l => l.Height) + 14 * scale.Factor;

        using var surface = Surface(size.Width, size.Height);
        var canvas = surface.Canvas;
        canvas.Clear(ChartPalette.Background.ToSKColor());
        using (var titlePaint = new SKPaint { Color = ChartPalette.Ink.ToSKColor(), IsAntialias = true })
        {
            float y = 8 * scale.Factor;
            foreach (var (text, font, height) in titleLines)
            {
                y += height;
                float width = font.MeasureText(text);
                canvas.DrawText(text, Math.Max((panelWidth - width) / 2, 4), y - height * 0.25f, font, titlePaint);
            }
        }

        float available = size.Height - titleHeight;
        float top = titleHeight;
        float padLeft = left * scale.Factor;
        float padRight = right * scale.Factor;
        var rowTops = new float[rows.Count];
        var rowPadTops = new float[rows.Count];
        for (int i = 0; i < rows.Count; i++)
        {
            var row = rows[i];
            float height = i == rows.Count - 1 ? size.Height - top : MathF.Round(available * row.Weight / totalWeight);
            float padTop = (rows[i].TitleLines > 0 ? 12 + 19 * rows[i].TitleLines : i == 0 && columnTitles ? 40 : 12) * scale.Factor;
            float padBottom = (row.ShowsXLabel ? 62 : 34) * scale.Factor;
            float columnWidth = panelWidth / row.Columns.Count;
            for (int c = 0; c < row.Columns.Count; c++)
            {
                var plot = row.Columns[c];
                plot.Layout.Fixed(new PixelPadding(padLeft, padRight, padBottom, padTop));
                DrawPanel(canvas, plot, c * columnWidth, top, (int)columnWidth, (int)height);
            }
            rowTops[i] = top;
            rowPadTops[i] = padTop;
            top += height;
        }

        // Each legend level with its row, lower if the legend above reaches past it, never off the picture.
        float previousBottom = 0;
        for (int i = 0; i < rows.Count; i++)
        {
            var legend = keys[i];
            if (legend is null || legend.ManualItems.Count == 0)
                continue;
            float keyTop = Math.Max(rowTops[i] + rowPadTops[i] - gap, previousBottom + gap);
            keyTop = Math.Min(keyTop, size.Height - rects[i].Height - 2 * gap);
            legend.Render(canvas, paint, new PixelRect(new Pixel(panelWidth, keyTop), keyWidth, rects[i].Height + 2 * gap), Alignment.UpperLeft);
            previousBottom = keyTop + rects[i].Height + gap;
        }

        Save(surface, path);
    }

    /// <summary>A white surface of the given size.</summary>
    public static SKSurface Surface(int width, int height) =>
        SKSurface.Create(new SKImageInfo(width, height, SKColorType.Rgba8888, SKAlphaType.Premul))
            ?? throw new InvalidOperationException($"SkiaSharp could not create a {width}×{height} surface");

    /// <summary>Renders a plot on its own surface and draws it at (<paramref name="x"/>, <paramref name="y"/>): a plot clears the whole canvas it is given.</summary>
    public static void DrawPanel(SKCanvas canvas, Plot plot, float x, float y, int width, int height)
    {
        using var surface = Surface(width, height);
        plot.Render(surface);
        using var image = surface.Snapshot();
        canvas.DrawImage(image, x, y);
    }

    /// <summary>The size a legend needs; a legend without items takes no room (ScottPlot cannot lay one out).</summary>
    public static PixelRect Measure(Legend? legend, PixelSize room, Paint paint) =>
        legend is null || legend.ManualItems.Count == 0 ? new PixelRect(0, 0) : legend.GetLayout(room, paint).LegendRect;

    /// <summary>Writes the surface as a PNG, creating the folder; the picture appears whole or not at all (<see cref="OutputFile"/>).</summary>
    /// <exception cref="DriftWatchException">The file cannot be written (full disk, no permission).</exception>
    public static void Save(SKSurface surface, string path)
    {
        ArgumentNullException.ThrowIfNull(surface);
        using var image = surface.Snapshot();
        using var png = image.Encode(SKEncodedImageFormat.Png, 100);
        OutputFile.Write(path, png.SaveTo);
    }

    /// <summary>The gate policy the run was judged under, read from the history; the default when none was stored or it cannot be read.</summary>
    public static GatePolicy PolicyOf(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        if (string.IsNullOrWhiteSpace(history.Policy))
            return GatePolicy.Default;
        try
        {
            return GatePolicy.Parse(history.Policy, "stored policy");
        }
        catch (DriftWatchException)
        {
            return GatePolicy.Default;
        }
    }

    /// <summary>Throws the usual error when a history has no complete epoch.</summary>
    public static void RequireEpochs(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        if (history.Epochs.IsEmpty)
            throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no complete epochs yet; nothing to chart");
    }

    /// <summary>
    /// Adds a heatmap whose column c is centred on x = <paramref name="first"/> + c and whose row r on y = r. ScottPlot places
    /// the centres of the outer cells on the extent's edges, so the extent runs from the first column to the last and from
    /// row 0 to the last row; a single column or row is doubled so it still has two centres.
    /// </summary>
    internal static ScottPlot.Plottables.Heatmap CellGrid(Plot plot, double[,] cells, double first, double last)
    {
        int rows = cells.GetLength(0), columns = cells.GetLength(1);
        if (columns == 1)
            cells = Widen(cells, alongColumns: true);
        if (rows == 1)
            cells = Widen(cells, alongColumns: false);
        var map = plot.Add.Heatmap(cells);
        map.Extent = new CoordinateRect(
            columns == 1 ? first - 0.25 : first,
            columns == 1 ? first + 0.25 : last,
            rows == 1 ? -0.25 : 0,
            rows == 1 ? 0.25 : rows - 1);
        return map;
    }

    private static double[,] Widen(double[,] cells, bool alongColumns)
    {
        int rows = cells.GetLength(0), columns = cells.GetLength(1);
        var wide = alongColumns ? new double[rows, columns * 2] : new double[rows * 2, columns];
        for (int r = 0; r < wide.GetLength(0); r++)
        {
            for (int c = 0; c < wide.GetLength(1); c++)
                wide[r, c] = alongColumns ? cells[r, c / 2] : cells[r / 2, c];
        }
        return wide;
    }
}
