using System.Collections.Immutable;
using DriftWatch.Detection;

namespace DriftWatch.Charts.Report;

/// <summary>
/// One story of a finding across a run: a (kind, feature) pair over one span of epochs — consecutive epochs whose verdicts
/// raised it, with the rule's own start — told once with its latest evidence. A pair raised again after a gap, or whose
/// rule starts its count again later, is a new story.
/// </summary>
/// <param name="Kind">What the finding is about.</param>
/// <param name="Feature">The feature, or empty for a run-level finding.</param>
/// <param name="Severity">The most severe verdict it asked for in the span.</param>
/// <param name="FlaggedEpochs">The epochs of the span whose verdict raised it, in order.</param>
/// <param name="Since">
/// The first epoch the story covers: the latest finding's own first epoch (where its streak or sum began), which is the
/// epoch its evidence names; never after the first flagged epoch.
/// </param>
/// <param name="Size">Its size at the last epoch raised.</param>
/// <param name="NoiseFloor">The noise floor it was judged against at the last epoch raised.</param>
/// <param name="Evidence">The evidence at the last epoch raised.</param>
public sealed record FindingSummary(
    FindingKind Kind,
    string Feature,
    VerdictKind Severity,
    ImmutableArray<int> FlaggedEpochs,
    int Since,
    double Size,
    double NoiseFloor,
    string Evidence)
{
    /// <summary>The methods whose maps alone showed it, when the method the verdict reads did not; empty for that method's own findings.</summary>
    public ImmutableArray<string> SeenOnlyBy { get; init; } = [];

    /// <summary>Spearman ρ of held-out importance between the methods at the last epoch raised (see <see cref="Finding.Agreement"/>); NaN when none.</summary>
    public double Agreement { get; init; } = double.NaN;

    /// <summary>The epochs the story covers: from <see cref="Since"/> to the last flagged epoch.</summary>
    public EpochSpan Span => new(Math.Min(Since, FlaggedEpochs[^1]), FlaggedEpochs[^1]);

    /// <summary>What <see cref="Size"/> and <see cref="NoiseFloor"/> measure, and in which unit (the kind's <see cref="Detection.Rules.FindingKindInfo.Measure"/>).</summary>
    public Detection.Rules.FindingMeasure Measure => Kind.Info.Measure;
}

/// <summary>Summarises a run's findings for tables: one row per (kind, feature).</summary>
public static class RunFindings
{
    /// <summary>
    /// The run's findings, one per story — a (kind, feature) pair over one span of consecutive flagged epochs — with its
    /// latest evidence, ordered by severity (Halt first), then by first epoch.
    /// </summary>
    public static IReadOnlyList<FindingSummary> Summarise(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        // A finding only other methods showed is kept apart from the verdict's method's finding of the same kind and feature.
        var open = new Dictionary<(FindingKind, string, string), List<(int Epoch, Finding Finding)>>();
        var last = new Dictionary<(FindingKind, string, string), int>();
        var spans = new List<((FindingKind, string, string) Key, List<(int Epoch, Finding Finding)> List)>();
        for (int position = 0; position < history.Epochs.Length; position++)
        {
            var epoch = history.Epochs[position];
            foreach (var finding in epoch.Findings)
            {
                var key = (finding.Kind, finding.Feature, finding.IsSeenByOtherMethodsOnly ? string.Join("\n", finding.SeenOnlyBy) : "");
                if (last.TryGetValue(key, out int seen) && seen == position)
                    continue; // the same pair twice in one verdict: the first is the story's
                // A new story when the pair was not raised at the epoch before, or its rule starts counting again later.
                bool continues = open.TryGetValue(key, out var list) && last[key] == position - 1
                    && finding.Epochs.First <= list![^1].Finding.Epochs.First;
                if (!continues)
                {
                    list = [];
                    open[key] = list;
                    spans.Add((key, list));
                }
                list!.Add((epoch.Epoch, finding));
                last[key] = position;
            }
        }
        return spans
            .Select(span =>
            {
                var (key, list) = span;
                var latest = list[^1].Finding;
                int since = Math.Min(latest.Epochs.First, list[0].Epoch);
                return new FindingSummary(key.Item1, key.Item2, list.Max(p => p.Finding.Severity), [.. list.Select(p => p.Epoch)], since, latest.Size, latest.NoiseFloor, latest.Evidence)
                {
                    SeenOnlyBy = latest.IsSeenByOtherMethodsOnly ? latest.SeenOnlyBy : [],
                    Agreement = latest.Agreement,
                };
            })
            .OrderByDescending(s => s.Severity)
            .ThenBy(s => s.FlaggedEpochs[0])
            .ToList();
    }

    /// <summary>Runs of equal verdicts, e.g. (1, 2, Continue), (3, 25, Halt); epochs without a verdict are left out.</summary>
    public static IReadOnlyList<(int First, int Last, VerdictKind Kind)> Timeline(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        var spans = new List<(int First, int Last, VerdictKind Kind)>();
        foreach (var epoch in history.Epochs)
        {
            if (epoch.Verdict is not VerdictKind kind)
                continue;
            if (spans.Count > 0 && spans[^1].Kind == kind && spans[^1].Last + 1 == epoch.Epoch)
                spans[^1] = (spans[^1].First, epoch.Epoch, kind);
            else
                spans.Add((epoch.Epoch, epoch.Epoch, kind));
        }
        return spans;
    }

    /// <summary>The finding's name in plain words with, for one only other methods showed, which ones: e.g. <c>leak, seen by smoothgrad only</c> (names as stored; escape them for display).</summary>
    public static string Describe(FindingSummary finding)
    {
        ArgumentNullException.ThrowIfNull(finding);
        return finding.SeenOnlyBy.IsDefaultOrEmpty
            ? Describe(finding.Kind)
            : $"{Describe(finding.Kind)}, seen by {string.Join(" and ", finding.SeenOnlyBy)} only";
    }

    /// <summary>The kind's name in plain words, e.g. <c>memorised identifier</c>.</summary>
    public static string Describe(FindingKind kind) => kind.Info.PlainWords;
}
