using System.Globalization;
using DriftWatch.Layers;
using ScottPlot;
using ScottPlot.TickGenerators;

namespace DriftWatch.Charts;

/// <summary>What each cell of the neuron map shows.</summary>
public enum NeuronMapValue
{
    /// <summary>The unit's class at that epoch: orange consistently negative, light grey inactive, mid grey mixed, blue positive.</summary>
    Class,

    /// <summary>The unit's mean conductance at that epoch (toward the predicted class), orange below zero, light grey at zero, blue above.</summary>
    Conductance,
}

/// <summary>
/// The neuron map of one layer: units × epochs, coloured by each unit's class or mean conductance at each epoch, units grouped
/// by their class over all audited epochs (consistently negative on top). Not an <see cref="IChart"/>: it draws a layer's
/// audit, not a run's feature history.
/// </summary>
public sealed class NeuronMapChart
{
    /// <summary>Mixed units: a mid grey, darker than inactive's light grey, so the classes differ in lightness as well as hue.</summary>
    internal static Color MixedColour { get; } = ChartPalette.MidGrey;

    private static readonly NeuronClass[] ClassOrder = [NeuronClass.ConsistentlyNegative, NeuronClass.Inactive, NeuronClass.Mixed, NeuronClass.Positive];

    /// <summary>Creates the chart.</summary>
    /// <param name="value">What each cell shows. Default <see cref="NeuronMapValue.Class"/>.</param>
    public NeuronMapChart(NeuronMapValue value = NeuronMapValue.Class)
    {
        if (!Enum.IsDefined(value))
            throw new DriftWatchException($"unknown neuron map value {value}; expected class or conductance");
        Value = value;
    }

    /// <summary>What each cell shows.</summary>
    public NeuronMapValue Value { get; }

    /// <summary>The chart's short name, used in file names.</summary>
    public string Name => Value == NeuronMapValue.Class ? "neurons" : "neurons-conductance";

    /// <summary>A picture height at which every unit's row is readable: <paramref name="height"/>, or taller (14 pixels a unit), at most <see cref="ChartSize.MaximumSide"/>.</summary>
    public static int ReadableHeight(int units, int height) =>
        Math.Clamp(Math.Max(height, 200 + 14 * units), ChartSize.MinimumSide, ChartSize.MaximumSide);

    /// <summary>The units top to bottom: by class over all epochs (consistently negative first), then by mean conductance.</summary>
    public static int[] Order(NeuronAudit audit)
    {
        ArgumentNullException.ThrowIfNull(audit);
        return [.. audit.Overall.OrderBy(u => Array.IndexOf(ClassOrder, u.Class)).ThenBy(u => u.MeanConductance).ThenBy(u => u.Unit).Select(u => u.Unit)];
    }

    /// <summary>Renders the map of <paramref name="audit"/> for run <paramref name="runName"/> to a PNG at <paramref name="path"/>.</summary>
    public void Render(NeuronAudit audit, string runName, string path, ChartSize size)
    {
        ArgumentNullException.ThrowIfNull(audit);
        ArgumentNullException.ThrowIfNull(runName);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        ChartFonts.EnsureRegistered();
        var scale = new TextScale(size);
        var plot = ChartKit.NewPlot(scale);
        var key = ChartKit.NewKey(scale);
        // Epoch numbers far apart get one column per audited epoch, not per number.
        var layout = EpochColumns.Of(audit.Epochs);
        int columns = layout.Count;
        var order = Order(audit);
        int units = order.Length;

        var cells = new double[units, columns];
        for (int r = 0; r < units; r++)
        {
            for (int c = 0; c < columns; c++)
            {
                int e = layout.Position(c);
                cells[r, c] = e < 0
                    ? double.NaN
                    : Value == NeuronMapValue.Class
                        ? Array.IndexOf(ClassOrder, audit.ByEpoch[e][order[r]].Class)
                        : audit.ByEpoch[e][order[r]].MeanConductance;
            }
        }
        var map = ChartKit.CellGrid(plot, cells, layout.First, layout.Last);
        map.NaNCellColor = ChartPalette.Background;
        float right = 14;
        if (Value == NeuronMapValue.Class)
        {
            map.Colormap = new ClassColormap();
            map.ManualRange = new ScottPlot.Range(-0.5, ClassOrder.Length - 0.5);
            foreach (var kind in ClassOrder)
                key.Legend.ManualItems.Add(ChartKit.FillItem($"{NeuronAudit.Label(kind)} ({ChartKit.Integer(audit.Count(kind))} over all epochs)", ColourOf(kind)));
        }
        else
        {
            var finite = cells.Cast<double>().Where(double.IsFinite).Select(Math.Abs).DefaultIfEmpty(0).Max();
            double top = finite > 0 ? finite : 1;
            map.Colormap = new HeatmapChart.DivergingColormap();
            map.ManualRange = new ScottPlot.Range(-top, top);
            var bar = plot.Add.ColorBar(map, Edge.Right);
            bar.Label = audit.Oriented ? "mean conductance toward the predicted class" : "mean conductance (target units)";
            bar.LabelStyle.FontSize = scale.AxisLabel;
            bar.Axis.TickLabelStyle.FontSize = scale.Tick;
            right = 130;
            key.Legend.ManualItems.Add(ChartKit.FillItem(audit.Oriented ? "pushes for the predicted class" : "raises the output", ChartPalette.Positive));
            key.Legend.ManualItems.Add(ChartKit.FillItem(audit.Oriented ? "pushes against it" : "lowers the output", ChartPalette.Negative));
            key.Legend.ManualItems.Add(ChartKit.FillItem("near zero", ChartPalette.Zero));
        }
        if (cells.Cast<double>().Any(double.IsNaN))
            key.Legend.ManualItems.Add(ChartKit.FillItem("no layer map at that epoch", ChartPalette.Background));

        // Unit names on the left, every one when there is room, else every k-th.
        float dataHeight = size.Height * 0.78f;
        int stride = Math.Max(1, (int)Math.Ceiling(units * 11.0 / dataHeight));
        float fontSize = Math.Min(scale.Tick, Math.Max(8, dataHeight / units * stride * 0.8f));
        var ticks = new NumericManual();
        for (int r = 0; r < units; r += stride)
            ticks.AddMajor(units - 1 - r, "unit " + ChartKit.Integer(order[r]));
        plot.Axes.Left.TickGenerator = ticks;
        plot.Axes.Left.TickLabelStyle.FontSize = fontSize;
        plot.Axes.Left.MajorTickStyle.Length = 3;
        plot.Axes.SetLimitsX(layout.First - 0.5, layout.Last + 0.5);
        plot.Axes.SetLimitsY(-0.5, units - 0.5);
        if (layout.Ticks(size.Width) is { } epochTicks)
            plot.Axes.Bottom.TickGenerator = epochTicks;
        plot.XLabel("epoch", scale.AxisLabel);

        string layer = DisplayText.Clean(audit.Layer, 40);
        string[] title =
        [
            $"Run “{DisplayText.Clean(runName, 60)}”: neuron map of layer “{layer}” ({DisplayText.Clean(audit.Method, 40)})",
            (Value == NeuronMapValue.Class ? "each unit's class at each epoch" : "each unit's mean conductance at each epoch")
                + $", over {ChartKit.Integer(audit.Rows)} probe rows; {ChartKit.Integer(units)} units grouped by their class over all epochs"
                + (audit.Oriented ? "; signs are toward the class the model predicts for each row" : "")
                + (layout.Note is { } note ? "; " + note : ""),
        ];
        ChartKit.Compose(path, size, scale, title, [new PanelRow([plot], key, 1, ShowsXLabel: true)], left: 100, right: right);
    }

    /// <summary>The colour of a class: orange consistently negative, light grey inactive, mid grey mixed, blue positive.</summary>
    internal static Color ColourOf(NeuronClass kind) => kind switch
    {
        NeuronClass.ConsistentlyNegative => ChartPalette.Negative,
        NeuronClass.Inactive => ChartPalette.Zero,
        NeuronClass.Mixed => MixedColour,
        _ => ChartPalette.Positive,
    };

    /// <summary>Parses a value name as the command line spells it.</summary>
    /// <exception cref="DriftWatchException">Not class or conductance.</exception>
    public static NeuronMapValue Parse(string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        return text.Trim().ToLowerInvariant() switch
        {
            "class" => NeuronMapValue.Class,
            "conductance" => NeuronMapValue.Conductance,
            _ => throw new DriftWatchException(string.Create(CultureInfo.InvariantCulture, $"neuron map colour must be class or conductance; got '{DisplayText.Clean(text, 40)}'")),
        };
    }

    // Discrete colours over the range −0.5 to 3.5: one band per class.
    private sealed class ClassColormap : IColormap
    {
        public string Name => "DriftWatch neuron classes";

        public Color GetColor(double position)
        {
            int band = Math.Clamp((int)Math.Floor(Math.Clamp(position, 0, 1) * ClassOrder.Length), 0, ClassOrder.Length - 1);
            return ColourOf(ClassOrder[band]);
        }
    }
}
