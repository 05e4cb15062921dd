using System.Collections.Immutable;
using DriftWatch.Detection;

namespace DriftWatch.Charts.Report;

/// <summary>One finding across a run: a (kind, feature) pair with every epoch whose verdict raised it.</summary>
/// <param name="Kind">What the finding is about.</param>
/// <param name="Feature">The feature, or empty for a run-level finding.</param>
/// <param name="Severity">The most severe verdict it asked for at any epoch.</param>
/// <param name="FlaggedEpochs">The epochs whose verdict raised it, in order.</param>
/// <param name="Since">The earliest epoch it covers (a finding held over several epochs reaches back to where its streak began).</param>
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
}

/// <summary>Summarises a run's findings for tables: one row per (kind, feature).</summary>
public static class RunFindings
{
    /// <summary>The run's findings, one per (kind, feature), ordered by severity (Halt first), then by first epoch.</summary>
    public static IReadOnlyList<FindingSummary> Summarise(RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(history);
        // A finding only other methods showed is kept apart from the verdict's method's finding of the same kind and feature.
        var groups = new Dictionary<(FindingKind, string, string), List<(int Epoch, Finding Finding)>>();
        var order = new List<(FindingKind, string, string)>();
        foreach (var epoch in history.Epochs)
        {
            foreach (var finding in epoch.Findings)
            {
                var key = (finding.Kind, finding.Feature, finding.IsSeenByOtherMethodsOnly ? string.Join("\n", finding.SeenOnlyBy) : "");
                if (!groups.TryGetValue(key, out var list))
                {
                    groups[key] = list = [];
                    order.Add(key);
                }
                list.Add((epoch.Epoch, finding));
            }
        }
        return order
            .Select(key =>
            {
                var list = groups[key];
                var last = list[^1].Finding;
                int since = list.Min(p => Math.Min(p.Finding.Epochs.First, p.Epoch));
                return new FindingSummary(key.Item1, key.Item2, list.Max(p => p.Finding.Severity), [.. list.Select(p => p.Epoch)], since, last.Size, last.NoiseFloor, last.Evidence)
                {
                    SeenOnlyBy = last.IsSeenByOtherMethodsOnly ? last.SeenOnlyBy : [],
                    Agreement = last.Agreement,
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
