using System.Collections.Immutable;
using DriftWatch.Detection.Rules;

namespace DriftWatch.Detection;

/// <summary>
/// One finding held over consecutive stored epochs: the same kind and feature (and, for a finding only other methods showed,
/// the same methods) in every verdict from <see cref="FromEpoch"/> to <see cref="ToEpoch"/>.
/// </summary>
/// <param name="Kind">What the finding is about.</param>
/// <param name="Feature">The feature, or empty for a run-level finding.</param>
/// <param name="FromEpoch">The first stored epoch of the span whose verdict lists it.</param>
/// <param name="ToEpoch">The last stored epoch of the span whose verdict lists it.</param>
/// <param name="EpochCount">How many stored verdicts the span covers (fewer than <c>ToEpoch − FromEpoch + 1</c> when epochs were not stored).</param>
/// <param name="Latest">The finding as the span's last verdict lists it: its severity, statistic, bound and evidence.</param>
public sealed record FindingSpan(FindingKind Kind, string Feature, int FromEpoch, int ToEpoch, int EpochCount, Finding Latest)
{
    /// <summary>The earliest epoch the finding reaches back to: where its rule's streak began at the span's first verdict (at most <see cref="FromEpoch"/>).</summary>
    public int SinceEpoch { get; init; } = FromEpoch;
}

/// <summary>Collapses a run's verdicts into finding spans, the unit tables and exports list findings by.</summary>
public static class FindingSpans
{
    /// <summary>
    /// The spans of <paramref name="verdicts"/> (the stored verdicts of one run, in epoch order): a (kind, feature) found at
    /// consecutive verdicts is one span; a verdict without it ends the span, and finding it again starts another.
    /// </summary>
    /// <remarks>Spans are ordered by their first epoch, then as that verdict lists them. A finding only other methods showed is kept apart from the verdict's method's finding of the same kind and feature.</remarks>
    /// <exception cref="ArgumentException">The verdicts are not in increasing epoch order.</exception>
    public static IReadOnlyList<FindingSpan> Collapse(IEnumerable<Verdict> verdicts)
    {
        ArgumentNullException.ThrowIfNull(verdicts);
        var open = new Dictionary<(FindingKind, string, string), (int Order, FindingSpan Span)>();
        var closed = new List<(int Order, FindingSpan Span)>();
        int order = 0;
        int? previous = null;
        foreach (var verdict in verdicts)
        {
            if (previous is int p && verdict.Epoch <= p)
                throw new ArgumentException($"verdicts must be in increasing epoch order; epoch {verdict.Epoch} follows {p}", nameof(verdicts));
            previous = verdict.Epoch;
            var seen = new HashSet<(FindingKind, string, string)>();
            foreach (var finding in verdict.Findings)
            {
                var key = (finding.Kind, finding.Feature, finding.IsSeenByOtherMethodsOnly ? string.Join("\n", finding.SeenOnlyBy) : "");
                if (!seen.Add(key))
                    continue; // one finding per key and verdict; a second one the same verdict lists adds nothing to the span
                open[key] = open.TryGetValue(key, out var current)
                    ? (current.Order, current.Span with { ToEpoch = verdict.Epoch, EpochCount = current.Span.EpochCount + 1, Latest = finding })
                    : (order++, new FindingSpan(finding.Kind, finding.Feature, verdict.Epoch, verdict.Epoch, 1, finding) { SinceEpoch = Math.Min(finding.Epochs.First, verdict.Epoch) });
            }
            foreach (var key in open.Keys.Where(k => !seen.Contains(k)).ToList())
            {
                closed.Add(open[key]);
                open.Remove(key);
            }
        }
        closed.AddRange(open.Values);
        return [.. closed.OrderBy(c => c.Span.FromEpoch).ThenBy(c => c.Order).Select(c => c.Span)];
    }
}

/// <summary>What a finding's statistic and bound measure, so tables never mix units (a GL percentage, a share, an alignment).</summary>
public static class FindingMeasures
{
    /// <summary>
    /// What <paramref name="finding"/>'s statistic and bound measure: its kind's <see cref="FindingKindInfo.Measure"/>, made exact
    /// where one kind has two faces — a leak or an overfitted feature judged on its share gap or its alignment gap (read from the
    /// epoch's stored <paramref name="statistics"/>: the value the finding's size equals), numerical trouble with or without a tolerance.
    /// </summary>
    /// <param name="finding">The finding.</param>
    /// <param name="statistics">The statistics of the epoch whose verdict lists the finding, or null when none are stored.</param>
    /// <param name="feature">The finding's feature index in the run's schema, or −1 for a run-level finding or one not in the schema.</param>
    public static FindingMeasure Of(Finding finding, EpochStatistics? statistics, int feature)
    {
        ArgumentNullException.ThrowIfNull(finding);
        return Of(finding.Kind, finding.Size, finding.NoiseFloor, statistics, feature);
    }

    /// <summary>What a finding's statistic and bound measure, from its kind, size and noise floor (see <see cref="Of(Finding, EpochStatistics?, int)"/>).</summary>
    /// <param name="kind">The finding's kind.</param>
    /// <param name="size">Its size (<see cref="Finding.Size"/>).</param>
    /// <param name="noiseFloor">Its noise floor or bound (<see cref="Finding.NoiseFloor"/>).</param>
    /// <param name="statistics">The statistics of the epoch whose verdict lists the finding, or null.</param>
    /// <param name="feature">The finding's feature index in the run's schema, or −1.</param>
    public static FindingMeasure Of(FindingKind kind, double size, double noiseFloor, EpochStatistics? statistics, int feature)
    {
        var declared = kind.Info.Measure;
        if (declared.Statistic == FindingMeasure.Gap.Statistic)
        {
            bool share = statistics is not null && feature >= 0 && feature < statistics.ShareGap.Length && statistics.ShareGap[feature].Equals(size);
            bool alignment = statistics is not null && feature >= 0 && feature < statistics.AlignmentGap.Length && statistics.AlignmentGap[feature].Equals(size);
            return share ? declared with { Size = "share gap", Statistic = "share_gap", Unit = "share" }
                : alignment ? declared with { Size = "alignment gap", Statistic = "alignment_gap", Unit = "alignment" }
                : declared;
        }
        if (kind == FindingKind.NumericalTrouble)
        {
            return noiseFloor > 0
                ? new FindingMeasure("mean convergence delta over mean |F(x) − F(x′)|", "tolerance", "") { Statistic = "relative_convergence_delta", Unit = "fraction", Bound = "policy_bound" }
                : new FindingMeasure("value", "", "") { Statistic = "value", Bound = "none" };
        }
        return declared;
    }
}
