using static DriftWatch.Detection.Rules.RuleText;

namespace DriftWatch.Detection.Rules;

/// <summary>The leak rule's settings, read from the policy.</summary>
/// <param name="Widths">Share gap beyond this many widths of its noise floor (policy <c>leakWidths</c>).</param>
/// <param name="MinimumGap">The share gap must also exceed this (policy <c>leakMinimumGap</c>).</param>
/// <param name="AlignmentWidths">Alignment gap beyond this many widths of its noise floor (policy <c>leakAlignmentWidths</c>).</param>
/// <param name="MinimumAlignmentGap">The alignment gap must also exceed this (policy <c>leakMinimumAlignmentGap</c>).</param>
/// <param name="MinimumShare">By alignment, the training share must be at least this (policy <c>leakMinimumShare</c>).</param>
public sealed record LeakSettings(double Widths, double MinimumGap, double AlignmentWidths, double MinimumAlignmentGap, double MinimumShare)
{
    /// <summary>The settings a policy gives.</summary>
    public static LeakSettings From(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return new(policy.LeakWidths, policy.LeakMinimumGap, policy.LeakAlignmentWidths, policy.LeakMinimumAlignmentGap, policy.LeakMinimumShare);
    }
}

/// <summary>
/// <b>Leak</b>: the model relies on a feature that is not identifier-like more for training rows — its share gap or its
/// label-alignment gap beyond the half-exchange null (<see cref="HalfExchangeNull"/>), Benjamini–Hochberg across features at
/// the policy's <c>relianceFalseDiscoveryRate</c> — <i>and</i> the feature's column fails the split-consistency check
/// (<see cref="Probing.SplitCheck"/>). The same reliance on a column that passes the check is an overfitted feature
/// (<see cref="OverfittedFeatureRule"/>), never a leak.
/// </summary>
/// <remarks>
/// A run without a split-consistency check (older stores, replays of them, a probe built from its halves alone) keeps the
/// attribution-only rule: share gap beyond <c>leakWidths</c> W and <c>leakMinimumGap</c>, or alignment gap beyond
/// <c>leakAlignmentWidths</c> W and <c>leakMinimumAlignmentGap</c> with <c>leakMinimumShare</c>; its first finding says once
/// that the data check was not available.
/// </remarks>
/// <param name="settings">What the rule reads from the policy.</param>
/// <param name="patience">Consecutive flagged epochs before a finding (the policy's patience).</param>
public sealed class LeakRule(LeakSettings settings, int patience) : IFindingRule
{
    private readonly LeakSettings _settings = settings ?? throw new ArgumentNullException(nameof(settings));
    private readonly Streaks _streaks = new(patience);
    private bool _saidUnavailable;

    private const string Unavailable = " (the split-consistency check was not available for this run, so this rests on attributions alone)";

    /// <summary>The leak kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.Leak,
        "leak",
        "A feature the model leans on for training rows but not for held-out rows.",
        "gap",
        SeverityRule.PolicyDecides,
        EvaluationRole.NamesFault,
        a => $"Check how {a.Features} is produced for training rows and for held-out rows: a value that carries the label only where the model trained is a leak. The divergence chart shows the gap.");

    private static string ShareSentence(string name, EpochStatistics s, int f, int since) =>
        Format($"'{name}' takes {s.ShareTraining[f]:P1} of attribution on training rows but {s.ShareHeldOut[f]:P1} on held-out rows ")
        + Format($"(gap {s.ShareGap[f]:+0.000;-0.000}, noise floor {s.ShareGapWidth[f]:0.000}) since epoch {since}: ")
        + "the model leans on it for rows it trained on only — a leaked or memorised signal";

    private static string AlignmentSentence(string name, EpochStatistics s, int f, int since) =>
        Format($"'{name}' points at the true label on training rows (alignment {s.AlignmentTraining[f]:+0.00;-0.00}) ")
        + Format($"but not on held-out rows ({s.AlignmentHeldOut[f]:+0.00;-0.00}; gap noise floor {s.AlignmentGapWidth[f]:0.00}) since epoch {since}, ")
        + Format($"with {s.ShareTraining[f]:P1} of training attribution: it carries the label only where the model trained — a leaked signal");

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
        var run = epoch.Run;
        if (run.Context.SplitCheck is not null && !s.ShareGapPValue.IsDefaultOrEmpty)
        {
            Checked(epoch, s, findings);
            return;
        }
        for (int f = 0; f < s.ShareGap.Length; f++)
        {
            // Two faces of a leak: the model leans on the feature more for training rows (share gap), or as much but
            // only there does it point at the label (alignment gap) — a leak that keeps value frequencies equal shows only the second.
            bool shareLeak = s.ShareGap[f] > _settings.Widths * s.ShareGapWidth[f] && s.ShareGap[f] > _settings.MinimumGap;
            bool alignmentLeak = !run.IdentifierLike[f] && s.AlignmentGap.Length > 0
                && s.AlignmentGap[f] > _settings.AlignmentWidths * s.AlignmentGapWidth[f] && s.AlignmentGap[f] > _settings.MinimumAlignmentGap
                && s.ShareTraining[f] >= _settings.MinimumShare;
            if (_streaks.Observe(f, shareLeak || alignmentLeak, epoch.Epoch) is not int since)
                continue;
            string name = run.FeatureName(f);
            string evidence = shareLeak ? ShareSentence(name, s, f, since) : AlignmentSentence(name, s, f, since);
            if (!_saidUnavailable)
            {
                evidence += Unavailable;
                _saidUnavailable = true;
            }
            findings.Add(new Finding(FindingKind.Leak, Kind.SeverityUnder(run.Policy), name,
                shareLeak ? s.ShareGap[f] : s.AlignmentGap[f], shareLeak ? s.ShareGapWidth[f] : s.AlignmentGapWidth[f], new EpochSpan(since, epoch.Epoch), evidence));
        }
    }

    // Reliance on the training half (the null) and a failed split-consistency check, both cited.
    private void Checked(EpochView epoch, EpochStatistics s, IList<Finding> findings)
    {
        var run = epoch.Run;
        var check = Reliance.Decided(run);
        var (byShare, byAlignment) = Reliance.Of(s, run.Policy);
        for (int f = 0; f < s.ShareGap.Length; f++)
        {
            var input = Reliance.CheckOf(run, check, f);
            bool leak = !run.IdentifierLike[f] && (byShare[f] || byAlignment[f]) && input is { Fails: true };
            if (_streaks.Observe(f, leak, epoch.Epoch) is not int since)
                continue;
            string name = run.FeatureName(f);
            string evidence = Reliance.Sentence(name, s, f, since, byShare[f], run.Policy.HalfExchangeResplits)
                + "; and its column relates to the label differently in training and held-out rows (" + Reliance.CheckSentence(input!, check!)
                + "): it carries the label only where the model trained — a leaked signal";
            findings.Add(Reliance.Finding(Kind, run, s, f, byShare[f], new EpochSpan(since, epoch.Epoch), evidence));
        }
    }
}
