using System.Collections.Immutable;
using DriftWatch.Detection;
using DriftWatch.Detection.Rules;
using ScottPlot;

namespace DriftWatch.Charts;

/// <summary>
/// The evidence behind one kind of finding: the statistic its rule judges across the epochs, per half where it has halves,
/// against its noise band or bound, with a bracket over each span of epochs where the finding was raised and a line where
/// the first Halt came. Each kind's panels are declared in one table keyed by kind (<see cref="EvidencePlans"/>).
/// </summary>
public sealed partial class EvidenceChart : IChart
{
    private const int ReasonLines = 4;

    /// <summary>Creates the chart.</summary>
    /// <param name="kind">The kind of finding to draw the evidence of; null picks the run's most severe finding (<see cref="ChartCatalog.MostSevere"/>).</param>
    /// <param name="feature">The feature, for kinds that name one; null picks the one the kind's most severe finding names.</param>
    /// <exception cref="DriftWatchException">A kind this version has no evidence chart for.</exception>
    public EvidenceChart(FindingKind? kind = null, string? feature = null)
    {
        if (kind is FindingKind k && EvidencePlans.For(k) is null)
            throw new DriftWatchException($"no evidence chart for finding kind '{DisplayText.Clean(k.Name, 40)}'; known kinds: {string.Join(", ", EvidencePlans.ByKind.Keys.Select(ChartCatalog.Spelling))}");
        Kind = kind;
        Feature = feature;
    }

    /// <summary>The kind asked for, or null for the run's most severe finding.</summary>
    public FindingKind? Kind { get; }

    /// <summary>The feature asked for, or null.</summary>
    public string? Feature { get; }

    /// <inheritdoc />
    public string Name => Kind is FindingKind k ? "evidence-" + ChartCatalog.Spelling(k) : "evidence";

    /// <summary>
    /// The kind and feature drawn for <paramref name="history"/>: those asked for, else the run's most severe finding's,
    /// else (a run with no finding) the leak rule's statistics of the top feature by held-out share.
    /// </summary>
    public (FindingKind Kind, string? Feature) Choose(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        var kind = Kind ?? ChartCatalog.MostSevere(history)?.Kind ?? FindingKind.Leak;
        var plan = EvidencePlans.For(kind) ?? EvidencePlans.ByKind[FindingKind.Leak];
        if (!plan.NamesFeature)
            return (kind, null);
        if (Feature is not null)
            return (kind, Feature);
        var named = ChartCatalog.Findings(history).Where(f => f.Finding.Kind == kind && f.Finding.Feature.Length > 0)
            .OrderByDescending(f => f.Finding.Severity).ThenBy(f => f.Epoch).Select(f => f.Finding.Feature).FirstOrDefault();
        if (named is not null)
            return (kind, named);
        var top = history.LastAttributed?.TopByHeldOutShare(1) ?? [];
        return (kind, top.IsEmpty ? null : history.FeatureNames[top[0]]);
    }

    /// <inheritdoc />
    public void Render(RunHistory history, string path, ChartSize size)
    {
        ChartKit.RequireEpochs(history);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        ChartFonts.EnsureRegistered();
        var scale = new TextScale(size);
        var (kind, featureName) = Choose(history);
        var plan = EvidencePlans.For(kind)!;
        int feature = featureName is null ? -1 : history.FeatureIndex(featureName);
        if (featureName is not null && feature < 0)
            throw new DriftWatchException($"run '{DisplayText.Clean(history.RunName)}' has no feature '{DisplayText.Clean(featureName)}'; its features: {DisplayText.Clean(string.Join(", ", history.FeatureNames), 400)}");

        var findings = history.Epochs
            .Select(e => (e.Epoch, Findings: e.Findings.Where(f => f.Kind == kind && (feature < 0 || f.Feature == featureName)).ToImmutableArray()))
            .Where(x => !x.Findings.IsEmpty)
            .ToDictionary(x => x.Epoch, x => x.Findings);
        var policy = ChartKit.PolicyOf(history);
        bool hasFeature = !plan.NamesFeature || feature >= 0;
        var panels = hasFeature
            ? plan.Panels(new EvidenceInput(history, policy, feature, findings))
            : [new EvidencePanel("nothing to draw", "", [], null, $"no attribution maps stored for method {DisplayText.Clean(history.Method, 40)}")];
        // Spans cover every epoch a finding of the kind names, whatever the finding's own span says (they end at their epoch).
        var spans = ChartKit.Spans(history, e => findings.ContainsKey(e.Epoch));

        var rows = new List<PanelRow>();
        for (int i = 0; i < panels.Count; i++)
        {
            bool last = i == panels.Count - 1;
            var (plot, key) = DrawPanel(history, panels[i], spans, scale);
            if (last)
                plot.XLabel("epoch", scale.AxisLabel);
            rows.Add(new PanelRow([plot], key, i == 0 ? 1.25f : 1, ShowsXLabel: last, TitleLines: panels[i].Lines.Count == 0 ? 1 : 2));
        }

        string subject = feature >= 0 ? $" of “{DisplayText.Clean(history.FeatureNames[feature], 40)}”" : "";
        string raised = spans.Count == 0
            ? $"no {kind.Info.PlainWords} finding{(feature >= 0 ? " names it" : "")}: the statistic is drawn for comparison"
            : $"{kind.Info.PlainWords} raised at epoch{(spans.Count == 1 && spans[0].First == spans[0].Last ? "" : "s")} {string.Join(", ", spans.Select(s => s.First == s.Last ? ChartKit.Integer(s.First) : $"{ChartKit.Integer(s.First)}–{ChartKit.Integer(s.Last)}"))}";
        var title = new List<string>
        {
            $"{ChartKit.RunTitle(history)}: evidence{subject} — {kind.Info.PlainWords}",
            $"{plan.Statistic}; {raised}",
        };
        if (plan.ListsReasons)
            title.AddRange(Reasons(findings));
        ChartKit.Compose(path, size, scale, title, rows, left: 84);
    }

    // The findings' reasons, each distinct one once (the epoch it names left out) with the epochs it came at, the most frequent first.
    private static IEnumerable<string> Reasons(IReadOnlyDictionary<int, ImmutableArray<Finding>> findings)
    {
        var byReason = findings.SelectMany(kv => kv.Value.Select(f => (kv.Key, Text: DisplayText.Clean(EpochNamed().Replace(f.Evidence, ""), 140))))
            .GroupBy(x => x.Text, StringComparer.Ordinal)
            .OrderByDescending(g => g.Count()).ThenBy(g => g.Min(x => x.Key))
            .ToList();
        foreach (var group in byReason.Take(ReasonLines))
        {
            var epochs = group.Select(x => x.Key).Distinct().Order().ToList();
            var spans = new List<string>();
            for (int i = 0; i < epochs.Count; i++)
            {
                int j = i;
                while (j + 1 < epochs.Count && epochs[j + 1] == epochs[j] + 1)
                    j++;
                spans.Add(i == j ? ChartKit.Integer(epochs[i]) : $"{ChartKit.Integer(epochs[i])}–{ChartKit.Integer(epochs[j])}");
                i = j;
            }
            string at = spans.Count > 3 ? $"{ChartKit.Integer(epochs.Count)} epochs from {ChartKit.Integer(epochs[0])}" : (epochs.Count == 1 ? "epoch " : "epochs ") + string.Join(", ", spans);
            yield return $"{at}: {group.Key}";
        }
        if (byReason.Count > ReasonLines)
            yield return $"… and {ChartKit.Integer(byReason.Count - ReasonLines)} other reasons ('driftwatch show' lists them)";
    }

    [System.Text.RegularExpressions.GeneratedRegex(@" at epoch [0-9]+")]
    private static partial System.Text.RegularExpressions.Regex EpochNamed();

    private static (Plot Plot, Plot Key) DrawPanel(RunHistory history, EvidencePanel panel, List<(int First, int Last)> spans, TextScale scale)
    {
        var plot = ChartKit.NewPlot(scale);
        var key = ChartKit.NewKey(scale);
        var shaded = ChartKit.ShadeVerdicts(plot, history);
        float width = 2.6f * scale.Factor;
        float thin = 1.7f * scale.Factor;
        int points = history.Epochs.Length;
        float marker = points <= 40 ? 6 * scale.Factor : 0;
        var drawn = new List<double>();

        if (panel.Band is var (bandLabel, band))
        {
            var values = ChartKit.Band(plot, history.Epochs, band, ChartPalette.Zero.WithAlpha(0.75));
            if (values.Count > 0)
            {
                drawn.AddRange(values);
                key.Legend.ManualItems.Add(ChartKit.FillItem(bandLabel, ChartPalette.Zero));
            }
        }
        if (panel.Lines.Count > 0)
        {
            var zero = plot.Add.HorizontalLine(0, 1, ChartPalette.Zero, LinePattern.Solid);
            zero.ExcludeFromLegend = true;
        }
        foreach (var line in panel.Lines)
        {
            var (color, pattern, lineWidth, shape) = Look(line.Role, width, thin);
            var segments = ChartKit.Segments(history.Epochs, line.Value);
            if (segments.Count == 0)
                continue;
            bool bound = line.Role is EvidenceRole.Bound or EvidenceRole.HeldOutBound or EvidenceRole.TrainingBound;
            foreach (var (xs, ys) in segments)
            {
                // A value known at one epoch only still shows: as a marker, or a short tick for a bound.
                float size = xs.Length == 1 ? Math.Max(marker, 6 * scale.Factor) : bound ? 0 : marker;
                ChartKit.AddLine(plot, xs, ys, color, pattern, lineWidth, bound && xs.Length == 1 ? MarkerShape.HorizontalBar : shape, size);
                drawn.AddRange(ys);
            }
            key.Legend.ManualItems.Add(ChartKit.LineItem(line.Label, color, pattern, lineWidth, bound ? MarkerShape.None : shape, bound ? 0 : Math.Max(marker, 0)));
        }

        if (panel.Lines.Count == 0 || drawn.Count == 0)
        {
            ChartKit.Note(plot, (history.Epochs[0].Epoch + (double)history.Epochs[^1].Epoch) / 2, panel.Lines.Count == 0 ? panel.Fires : "no stored statistics for these epochs", scale);
        }
        else
        {
            // Room above the data for the brackets of the spans where the finding was raised.
            double low = Math.Min(0, drawn.Where(double.IsFinite).Min());
            double high = Math.Max(0, drawn.Where(double.IsFinite).Max());
            double range = high > low ? high - low : Math.Max(Math.Abs(high), 1);
            double top = high + range * 0.1;
            plot.Axes.SetLimitsY(low - range * 0.06, top + range * 0.08);
            if (spans.Count > 0)
            {
                foreach (var (from, to) in spans)
                {
                    // A quarter epoch beyond each end, so a one-epoch span still shows as a short bracket.
                    var bracket = ChartKit.AddLine(plot, [from - 0.25, to + 0.25], [top, top], ChartPalette.Ink, LinePattern.Solid, 2.2f * scale.Factor, MarkerShape.VerticalBar, 12 * scale.Factor);
                    bracket.MarkerLineWidth = 2.2f * scale.Factor;
                }
                key.Legend.ManualItems.Add(ChartKit.LineItem("finding raised (first to last epoch)", ChartPalette.Ink, LinePattern.Solid, 2.2f * scale.Factor, MarkerShape.VerticalBar, 12 * scale.Factor));
            }
        }
        ChartKit.VerdictKey(key.Legend, shaded, history);
        // The rule's reading beneath the panel's title, so the legend keeps to the lines.
        plot.Title(panel.Lines.Count == 0 ? panel.Title : $"{panel.Title}\n{panel.Fires}", scale.Tick);
        plot.YLabel(panel.YLabel, scale.AxisLabel);
        ChartKit.EpochAxis(plot, history);
        return (plot, key);
    }

    private static (Color Color, LinePattern Pattern, float Width, MarkerShape Shape) Look(EvidenceRole role, float width, float thin) => role switch
    {
        EvidenceRole.Statistic => (ChartPalette.Categorical[2], LinePattern.Solid, width, MarkerShape.FilledDiamond),
        EvidenceRole.HeldOut => (ChartPalette.HeldOut, LinePattern.Solid, thin, MarkerShape.FilledCircle),
        EvidenceRole.Training => (ChartPalette.Training, LinePattern.Dashed, thin, MarkerShape.FilledSquare),
        EvidenceRole.HeldOutBound => (ChartPalette.HeldOut, LinePattern.Dotted, thin, MarkerShape.None),
        EvidenceRole.TrainingBound => (ChartPalette.Training, LinePattern.Dotted, thin, MarkerShape.None),
        _ => (ChartPalette.Ink, LinePattern.Dotted, thin, MarkerShape.None),
    };
}
