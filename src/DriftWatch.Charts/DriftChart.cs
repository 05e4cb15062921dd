using DriftWatch.Detection;
using ScottPlot;
using ScottPlot.TickGenerators;

namespace DriftWatch.Charts;

/// <summary>
/// How much the whole importance picture moved, epoch by epoch: the verdict at each epoch as a marker; the drift score
/// (1 − Spearman ρ against the previous attributed epoch) and the rank agreement with the best-validation epoch; the
/// generalisation gap (validation minus train loss); and Prechelt's generalisation loss with the policy's threshold.
/// </summary>
public sealed class DriftChart : IChart
{
    /// <inheritdoc />
    public string Name => "drift";

    /// <inheritdoc />
    public void Render(RunHistory history, string path, ChartSize size)
    {
        ChartKit.RequireEpochs(history);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        ChartFonts.EnsureRegistered();
        var scale = new TextScale(size);
        float width = 2.2f * scale.Factor;
        float marker = history.Epochs.Length <= 60 ? 6 * scale.Factor : 0;
        double middle = (history.Epochs[0].Epoch + (double)history.Epochs[^1].Epoch) / 2;

        var verdicts = ChartKit.NewPlot(scale);
        var verdictKey = ChartKit.NewKey(scale);
        var shaded = ChartKit.ShadeVerdicts(verdicts, history);
        DrawVerdicts(verdicts, verdictKey.Legend, history, scale);
        ChartKit.VerdictKey(verdictKey.Legend, shaded, history);

        var ranks = ChartKit.NewPlot(scale);
        var ranksKey = ChartKit.NewKey(scale);
        ChartKit.ShadeVerdicts(ranks, history);
        var drift = ChartKit.Segments(history.Epochs, e => e.Statistics?.Drift);
        var agreement = ChartKit.Segments(history.Epochs, e => e.Statistics?.RankAgreementWithBest);
        if (drift.Count + agreement.Count == 0)
        {
            ChartKit.Note(ranks, middle, history.Method == history.PrimaryMethod ? "no detector statistics stored for this run" : $"the detector reads {DisplayText.Clean(history.PrimaryMethod, 40)}; chart that method", scale);
        }
        else
        {
            var zero = ranks.Add.HorizontalLine(0, 1, ChartPalette.Zero, LinePattern.Solid);
            zero.ExcludeFromLegend = true;
            foreach (var (xs, ys) in drift)
                ChartKit.AddLine(ranks, xs, ys, ChartPalette.Categorical[0], LinePattern.Solid, width, MarkerShape.FilledCircle, marker);
            foreach (var (xs, ys) in agreement)
                ChartKit.AddLine(ranks, xs, ys, ChartPalette.Categorical[2], LinePattern.Dashed, width, MarkerShape.FilledTriangleUp, marker);
            ranksKey.Legend.ManualItems.Add(ChartKit.LineItem("drift score (1 − ρ vs previous)", ChartPalette.Categorical[0], LinePattern.Solid, width, MarkerShape.FilledCircle, marker));
            ranksKey.Legend.ManualItems.Add(ChartKit.LineItem("rank agreement with best epoch (ρ)", ChartPalette.Categorical[2], LinePattern.Dashed, width, MarkerShape.FilledTriangleUp, marker));
            ChartKit.FitY(ranks, drift.Concat(agreement).SelectMany(p => p.Ys), floor: -1.05, ceiling: 2.05, includeZero: true);
        }
        ranks.YLabel("Spearman-based", scale.AxisLabel);

        var gap = ChartKit.NewPlot(scale);
        var gapKey = ChartKit.NewKey(scale);
        ChartKit.ShadeVerdicts(gap, history);
        var gaps = ChartKit.Segments(history.Epochs, e => e.TrainLoss is double t && e.ValidationLoss is double v ? v - t : null);
        if (gaps.Count == 0)
        {
            ChartKit.Note(gap, middle, "no train and validation loss recorded", scale);
        }
        else
        {
            foreach (var (xs, ys) in gaps)
                ChartKit.AddLine(gap, xs, ys, ChartPalette.Categorical[1], LinePattern.Solid, width, MarkerShape.FilledSquare, marker);
            gapKey.Legend.ManualItems.Add(ChartKit.LineItem("validation − train loss", ChartPalette.Categorical[1], LinePattern.Solid, width, MarkerShape.FilledSquare, marker));
            ChartKit.FitY(gap, gaps.SelectMany(p => p.Ys), includeZero: true);
        }
        gap.YLabel("loss gap", scale.AxisLabel);

        var loss = ChartKit.NewPlot(scale);
        var lossKey = ChartKit.NewKey(scale);
        ChartKit.ShadeVerdicts(loss, history);
        var generalisation = GeneralisationLoss(history);
        double threshold = Threshold(history);
        if (generalisation.Count == 0)
        {
            ChartKit.Note(loss, middle, "no validation loss recorded", scale);
        }
        else
        {
            foreach (var (xs, ys) in generalisation)
                ChartKit.AddLine(loss, xs, ys, ChartPalette.Categorical[3], LinePattern.Solid, width, MarkerShape.FilledDiamond, marker);
            var line = loss.Add.HorizontalLine(threshold, 1.5f * scale.Factor, ChartPalette.Ink, LinePattern.Dotted);
            line.ExcludeFromLegend = true;
            lossKey.Legend.ManualItems.Add(ChartKit.LineItem("generalisation loss GL", ChartPalette.Categorical[3], LinePattern.Solid, width, MarkerShape.FilledDiamond, marker));
            lossKey.Legend.ManualItems.Add(ChartKit.LineItem($"policy threshold ({threshold.ToString("0.#", System.Globalization.CultureInfo.InvariantCulture)}%)", ChartPalette.Ink, LinePattern.Dotted, 1.5f * scale.Factor));
            ChartKit.FitY(loss, generalisation.SelectMany(p => p.Ys).Append(threshold * 1.2), floor: 0, includeZero: true);
        }
        loss.YLabel("GL (%)", scale.AxisLabel);
        loss.XLabel("epoch", scale.AxisLabel);

        foreach (var plot in new[] { verdicts, ranks, gap, loss })
            ChartKit.EpochAxis(plot, history);

        string[] title =
        [
            $"{ChartKit.RunTitle(history)}: drift of the importance picture and generalisation",
            $"ranks of held-out shares ({DisplayText.Clean(history.PrimaryMethod, 40)}); generalisation loss GL(t) = 100 · (validation loss / lowest so far − 1), Prechelt 1998",
        ];
        // A gap of two finite losses can still overflow (1e308 − (−1e308)); it is left out like a value beyond the range.
        int overflowed = history.Epochs.Count(e => e.TrainLoss is double t && e.ValidationLoss is double v && double.IsFinite(t) && double.IsFinite(v) && !ChartKit.IsDrawn(v - t));
        if (ChartKit.UndrawnNote(overflowed, "loss gaps") is { } undrawn)
            title = [.. title, undrawn];
        ChartKit.Compose(path, size, scale, title,
        [
            new PanelRow([verdicts], verdictKey, 0.45f, ShowsXLabel: false),
            new PanelRow([ranks], ranksKey, 1.1f, ShowsXLabel: false),
            new PanelRow([gap], gapKey, 0.8f, ShowsXLabel: false),
            new PanelRow([loss], lossKey, 1f, ShowsXLabel: true),
        ]);
    }

    private static void DrawVerdicts(Plot plot, Legend legend, RunHistory history, TextScale scale)
    {
        float size = 10 * scale.Factor;
        (VerdictKind Kind, MarkerShape Shape, Color Color, string Label)[] styles =
        [
            (VerdictKind.Continue, MarkerShape.OpenCircle, ChartPalette.Muted, "Continue"),
            (VerdictKind.Caution, MarkerShape.FilledTriangleUp, ChartPalette.Muted, "Caution"),
            (VerdictKind.Halt, MarkerShape.FilledSquare, ChartPalette.Ink, "Halt"),
        ];
        foreach (var (kind, shape, color, label) in styles)
        {
            double[] xs = [.. history.Epochs.Where(e => e.Verdict == kind).Select(e => (double)e.Epoch)];
            if (xs.Length == 0)
                continue;
            double[] ys = [.. xs.Select(_ => 0.5)];
            var markers = plot.Add.Markers(xs, ys, shape, size, color);
            markers.MarkerLineWidth = 1.5f * scale.Factor;
            legend.ManualItems.Add(ChartKit.MarkerItem(label, color, shape, size));
        }
        plot.Axes.SetLimitsY(0, 1);
        plot.Axes.Left.TickGenerator = new NumericManual();
        plot.YLabel("verdict", scale.AxisLabel);
    }

    private static List<(double[] Xs, double[] Ys)> GeneralisationLoss(RunHistory history)
    {
        var stored = ChartKit.Segments(history.Epochs, e => e.Statistics?.GeneralisationLoss);
        if (stored.Count > 0)
            return stored;
        // No detector statistics (another method, or an old store): compute GL from the validation losses.
        var withLoss = history.Epochs.Where(e => e.ValidationLoss is double v && double.IsFinite(v)).ToList();
        if (withLoss.Count == 0)
            return [];
        var values = Statistics.GeneralisationLoss([.. withLoss.Select(e => e.ValidationLoss!.Value)]);
        var byEpoch = withLoss.Select((e, i) => (e.Epoch, Value: values[i])).ToDictionary(p => p.Epoch, p => p.Value);
        return ChartKit.Segments(history.Epochs, e => byEpoch.TryGetValue(e.Epoch, out double v) ? v : null);
    }

    private static double Threshold(RunHistory history) => ChartKit.PolicyOf(history).GeneralisationLossThreshold;
}
