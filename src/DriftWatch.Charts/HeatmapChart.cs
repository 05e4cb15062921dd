using System.Globalization;
using ScottPlot;
using ScottPlot.TickGenerators;

namespace DriftWatch.Charts;

/// <summary>What each cell of the heatmap shows.</summary>
public enum HeatmapValue
{
    /// <summary>The feature's share of mean |attribution| on the held-out half (percent), light grey at zero to blue.</summary>
    Share,

    /// <summary>The feature's mean signed attribution on the held-out half, orange below zero, light grey at zero, blue above.</summary>
    SignedMean,

    /// <summary>Divergence: the feature's share on the training half minus the held-out half (percentage points), orange to grey to blue.</summary>
    ShareGap,
}

/// <summary>
/// Epoch × feature heatmap of one value per cell, features ordered by their held-out share at the last attributed epoch
/// (largest on top); a dot marks each cell where a finding names the feature. Up to <see cref="MaximumRows"/> rows are
/// drawn one feature each; beyond that the smallest features are summed into one last row.
/// </summary>
public sealed class HeatmapChart : IChart
{
    /// <summary>The most rows drawn; with more features, the smallest are summed into the last row.</summary>
    public const int MaximumRows = 60;

    private const int RowNameLength = 30;

    /// <summary>Creates the chart.</summary>
    /// <param name="value">What each cell shows. Default <see cref="HeatmapValue.Share"/>.</param>
    public HeatmapChart(HeatmapValue value = HeatmapValue.Share)
    {
        if (!Enum.IsDefined(value))
            throw new DriftWatchException($"unknown heatmap value {value}; expected share, signed or gap");
        Value = value;
    }

    /// <summary>What each cell shows.</summary>
    public HeatmapValue Value { get; }

    /// <inheritdoc />
    public string Name => Value switch
    {
        HeatmapValue.Share => "heatmap",
        HeatmapValue.SignedMean => "heatmap-signed",
        _ => "heatmap-gap",
    };

    /// <summary>A picture height at which every row's name is readable: <paramref name="height"/>, or taller with many rows (15 pixels a row), at most <see cref="ChartSize.MaximumSide"/>.</summary>
    public static int ReadableHeight(RunHistory history, int height)
    {
        ArgumentNullException.ThrowIfNull(history);
        int rows = Math.Min(history.FeatureNames.Length, MaximumRows);
        return Math.Clamp(Math.Max(height, 180 + 15 * rows), ChartSize.MinimumSide, ChartSize.MaximumSide);
    }

    /// <summary>The rows of the heatmap: one feature index per row, top first; the last row lists several features when they were summed.</summary>
    public static IReadOnlyList<int[]> Rows(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        var order = history.LastAttributed?.TopByHeldOutShare(history.FeatureNames.Length) ?? [];
        if (order.Length <= MaximumRows)
            return order.Select(f => new[] { f }).ToList();
        var rows = order.Take(MaximumRows - 1).Select(f => new[] { f }).ToList();
        rows.Add([.. order.Skip(MaximumRows - 1)]);
        return rows;
    }

    /// <inheritdoc />
    public void Render(RunHistory history, string path, ChartSize size)
    {
        ChartKit.RequireEpochs(history);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        ChartFonts.EnsureRegistered();
        var scale = new TextScale(size);
        var plot = ChartKit.NewPlot(scale);
        var key = ChartKit.NewKey(scale);
        int first = history.Epochs[0].Epoch;
        int last = history.Epochs[^1].Epoch;
        var rows = Rows(history);
        string[] title =
        [
            $"{ChartKit.RunTitle(history)}: {Describe()} per epoch and feature ({DisplayText.Clean(history.Method, 40)})",
            rows.Count == 0
                ? "no attribution maps stored for this method"
                : rows[^1].Length > 1
                    ? $"features ordered by held-out share at epoch {ChartKit.Integer(history.LastAttributed!.Epoch)}; the last row sums the {ChartKit.Integer(rows[^1].Length)} smallest"
                    : $"all {ChartKit.Integer(rows.Count)} features, ordered by held-out share at epoch {ChartKit.Integer(history.LastAttributed!.Epoch)}",
        ];

        float left = 90;
        if (rows.Count == 0)
        {
            ChartKit.EpochAxis(plot, history);
            ChartKit.Note(plot, (first + (double)last) / 2, $"no attribution maps stored for method {DisplayText.Clean(history.Method, 40)}", scale);
        }
        else
        {
            // Epoch numbers far apart (a loop passing its step count) get one column per stored epoch, not per number.
            var epochs = history.Epochs;
            var layout = EpochColumns.Of(epochs.Select(e => e.Epoch));
            int columns = layout.Count;
            var cells = new double[rows.Count, columns];
            for (int r = 0; r < rows.Count; r++)
            {
                for (int c = 0; c < columns; c++)
                {
                    int position = layout.Position(c);
                    cells[r, c] = position >= 0 && epochs[position].IsAttributed ? rows[r].Sum(f => CellValue(epochs[position], f)) : double.NaN;
                }
            }

            var finite = cells.Cast<double>().Where(double.IsFinite).ToList();
            double top = finite.Count == 0 ? 1 : finite.Select(Math.Abs).Max();
            if (top <= 0)
                top = 1;
            var map = ChartKit.CellGrid(plot, cells, layout.First, layout.Last);
            map.NaNCellColor = ChartPalette.Background;
            map.Colormap = Value == HeatmapValue.Share ? new SequentialColormap() : new DivergingColormap();
            map.ManualRange = Value == HeatmapValue.Share ? new ScottPlot.Range(0, top) : new ScottPlot.Range(-top, top);
            var bar = plot.Add.ColorBar(map, Edge.Right);
            bar.Label = Unit();
            bar.LabelStyle.FontSize = scale.AxisLabel;
            bar.Axis.TickLabelStyle.FontSize = scale.Tick;

            // Row names on the left axis, as large as the row height allows.
            float dataHeight = size.Height * 0.78f;
            float fontSize = Math.Min(scale.Tick, Math.Max(7, dataHeight / rows.Count * 0.82f));
            var ticks = new NumericManual();
            var labels = new string[rows.Count];
            for (int r = 0; r < rows.Count; r++)
            {
                labels[r] = rows[r].Length == 1
                    ? DisplayText.Clean(history.FeatureNames[rows[r][0]], RowNameLength)
                    : $"other {ChartKit.Integer(rows[r].Length)} features (sum)";
                ticks.AddMajor(rows.Count - 1 - r, labels[r]);
            }
            plot.Axes.Left.TickGenerator = ticks;
            plot.Axes.Left.TickLabelStyle.FontSize = fontSize;
            plot.Axes.Left.MajorTickStyle.Length = 3;
            using var font = new SkiaSharp.SKFont(Fonts.GetTypeface(ChartFonts.FamilyName, false, false), fontSize);
            left = (labels.Max(l => font.MeasureText(l)) + 30 * scale.Factor) / scale.Factor;

            // A dot in each cell where a finding names the feature.
            var flaggedXs = new List<double>();
            var flaggedYs = new List<double>();
            for (int r = 0; r < rows.Count; r++)
            {
                if (rows[r].Length != 1)
                    continue;
                string name = history.FeatureNames[rows[r][0]];
                for (int position = 0; position < epochs.Length; position++)
                {
                    if (!epochs[position].Findings.Any(f => f.Feature == name))
                        continue;
                    flaggedXs.Add(layout.XOfPosition(position));
                    flaggedYs.Add(rows.Count - 1 - r);
                }
            }
            if (flaggedXs.Count > 0)
            {
                float dot = Math.Clamp(Math.Min(dataHeight / rows.Count, size.Width * 0.7f / columns) * 0.35f, 2.5f, 9 * scale.Factor);
                plot.Add.Markers(flaggedXs.ToArray(), flaggedYs.ToArray(), MarkerShape.FilledCircle, dot, ChartPalette.Ink);
                key.Legend.ManualItems.Add(ChartKit.MarkerItem("a finding names the feature at that epoch", ChartPalette.Ink, MarkerShape.FilledCircle, 7 * scale.Factor));
            }
            if (cells.Cast<double>().Any(double.IsNaN))
                key.Legend.ManualItems.Add(ChartKit.FillItem("not attributed", ChartPalette.Background));
            plot.Axes.SetLimitsX(layout.First - 0.5, layout.Last + 0.5);
            plot.Axes.SetLimitsY(-0.5, rows.Count - 0.5);
            if (layout.Ticks(size.Width) is { } epochTicks)
            {
                plot.Axes.Bottom.TickGenerator = epochTicks;
                title[1] += "; " + layout.Note;
            }
        }
        plot.XLabel("epoch", scale.AxisLabel);

        ChartKit.Compose(path, size, scale, title, [new PanelRow([plot], key, 1, ShowsXLabel: true)], left: Math.Max(left, 60), right: rows.Count == 0 ? 14 : 120);
    }

    private string Describe() => Value switch
    {
        HeatmapValue.Share => "held-out share of importance",
        HeatmapValue.SignedMean => "held-out mean signed attribution",
        _ => "divergence (training minus held-out share)",
    };

    private string Unit() => Value switch
    {
        HeatmapValue.Share => "share of mean |attribution| (%)",
        HeatmapValue.SignedMean => "mean signed attribution (target units)",
        _ => "training − held-out share (points)",
    };

    private double CellValue(EpochRecord epoch, int feature) => Value switch
    {
        HeatmapValue.Share => epoch.HeldOutShare[feature] * 100,
        HeatmapValue.SignedMean => epoch.HeldOutMeanSigned.Length > feature ? epoch.HeldOutMeanSigned[feature] : double.NaN,
        _ => (epoch.TrainingShare[feature] - epoch.HeldOutShare[feature]) * 100,
    };

    // Light grey at zero to blue at the top of the range.
    private sealed class SequentialColormap : IColormap
    {
        public string Name => "DriftWatch grey to blue";

        public Color GetColor(double position) => Ramp(ChartPalette.Positive, ChartPalette.DeepPositive, Math.Clamp(position, 0, 1));
    }

    // Orange below zero, light grey at zero, blue above; the range is symmetric, so grey sits at position 0.5. The neuron map uses it too.
    internal sealed class DivergingColormap : IColormap
    {
        public string Name => "DriftWatch orange to grey to blue";

        public Color GetColor(double position)
        {
            double p = Math.Clamp(position, 0, 1);
            return p < 0.5 ? Ramp(ChartPalette.Negative, ChartPalette.DeepNegative, (0.5 - p) * 2) : Ramp(ChartPalette.Positive, ChartPalette.DeepPositive, (p - 0.5) * 2);
        }
    }

    // Light grey at 0, the palette's hue at 0.6, its dark end at 1.
    private static Color Ramp(Color hue, Color deep, double t) =>
        t <= 0.6 ? Mix(ChartPalette.Zero, hue, t / 0.6) : Mix(hue, deep, (t - 0.6) / 0.4);

    private static Color Mix(Color from, Color to, double t) => new(
        (byte)Math.Round(from.R + (to.R - from.R) * t),
        (byte)Math.Round(from.G + (to.G - from.G) * t),
        (byte)Math.Round(from.B + (to.B - from.B) * t));

    /// <summary>The heatmap's value names as the command line spells them.</summary>
    public static string Spelling(HeatmapValue value) => value switch
    {
        HeatmapValue.Share => "share",
        HeatmapValue.SignedMean => "signed",
        _ => "gap",
    };

    /// <summary>Parses a value name as the command line spells it.</summary>
    /// <exception cref="DriftWatchException">Not one of share, signed, gap.</exception>
    public static HeatmapValue Parse(string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        return text.Trim().ToLowerInvariant() switch
        {
            "share" => HeatmapValue.Share,
            "signed" => HeatmapValue.SignedMean,
            "gap" => HeatmapValue.ShareGap,
            _ => throw new DriftWatchException(string.Create(CultureInfo.InvariantCulture, $"heatmap value must be share, signed or gap; got '{DisplayText.Clean(text, 40)}'")),
        };
    }
}
