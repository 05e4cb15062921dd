using System.Collections.Immutable;
using static DriftWatch.Detection.Rules.RuleText;

namespace DriftWatch.Detection.Rules;

/// <summary>The dominant-feature rule's settings, read from the policy.</summary>
/// <param name="Widths">The top feature's lead over the next beyond this many widths of its noise floor on both halves (policy <c>dominanceWidths</c>).</param>
public sealed record DominantFeatureSettings(double Widths)
{
    /// <summary>The settings a policy gives.</summary>
    public static DominantFeatureSettings From(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return new(policy.DominanceWidths);
    }
}

/// <summary>
/// <b>Dominant feature</b>: one feature's share leads the next by more than its widths of the noise floor W on both halves,
/// the same feature on top of both. A Caution: it may be genuine. <see cref="ProbableLeakRule"/> may upgrade it.
/// </summary>
/// <param name="settings">What the rule reads from the policy.</param>
/// <param name="patience">Consecutive flagged epochs before a finding (the policy's patience).</param>
public sealed class DominantFeatureRule(DominantFeatureSettings settings, int patience) : IFindingRule
{
    private readonly DominantFeatureSettings _settings = settings ?? throw new ArgumentNullException(nameof(settings));
    private readonly Streaks _streaks = new(patience);

    /// <summary>The dominant-feature kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.DominantFeature,
        "dominant feature",
        "One feature decides on both halves; may be genuine.",
        "dominance",
        SeverityRule.AlwaysCaution,
        EvaluationRole.Advisory,
        a => $"{a.Features} decides on both halves; that may be genuine, but check how it is produced before trusting it.")
    {
        Measure = new FindingMeasure("lead in held-out share over the runner-up", "noise floor", "") { Statistic = "lead", Unit = "share" },
    };

    private static string Sentence(string name, double share, double next, int since) =>
        Format($"'{name}' decides on both halves: {share:P1} of held-out attribution against {next:P1} for the next feature, since epoch {since}; ")
        + "may be genuine — check how it is produced";

    /// <inheritdoc/>
    public FindingKindInfo Info => Kind;

    /// <inheritdoc/>
    public RuleStage Stage => RuleStage.Attribution;

    /// <inheritdoc/>
    public void Evaluate(EpochView epoch, IList<Finding> findings)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        ArgumentNullException.ThrowIfNull(findings);
        var s = epoch.Statistics!;
        int features = s.ShareHeldOut.Length;
        if (features < 2)
            return;
        int top = Top(s.ShareHeldOut, -1);
        int runnerUp = Top(s.ShareHeldOut, top);
        int trainingTop = Top(s.ShareTraining, -1);
        int trainingRunnerUp = Top(s.ShareTraining, trainingTop);
        double lead = s.ShareHeldOut[top] - s.ShareHeldOut[runnerUp];
        double trainingLead = s.ShareTraining[trainingTop] - s.ShareTraining[trainingRunnerUp];
        double width = s.LeadWidthHeldOut;
        bool dominant = trainingTop == top
            && lead > _settings.Widths * width
            && trainingLead > _settings.Widths * s.LeadWidthTraining;
        // Only the current top feature's streak is touched: a feature that falls from the top keeps its count.
        if (_streaks.Observe(top, dominant, epoch.Epoch) is not int since)
            return;
        string name = epoch.Run.FeatureName(top);
        findings.Add(new Finding(FindingKind.DominantFeature, Kind.SeverityUnder(epoch.Run.Policy), name, lead, width, new EpochSpan(since, epoch.Epoch),
            Sentence(name, s.ShareHeldOut[top], s.ShareHeldOut[runnerUp], since)));
    }

    /// <summary>The feature with the largest share other than <paramref name="skip"/> (ties: the lower index).</summary>
    internal static int Top(ImmutableArray<double> share, int skip) =>
        Enumerable.Range(0, share.Length).Where(f => f != skip).OrderByDescending(f => share[f]).ThenBy(f => f).First();
}
