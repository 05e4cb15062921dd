namespace DriftWatch.Detection.Rules;

/// <summary>
/// <b>Overfitted feature</b>: the model relies on a feature that is not identifier-like more for training rows (share or
/// alignment gap beyond the half-exchange null, as for a leak), but the feature's column passes the split-consistency
/// check — it relates to the label the same way in training and held-out rows — so the model is fitting training rows on
/// a genuine feature, not reading a leak. Raised only while the loss rule also sees overfitting (GL beyond the policy's α):
/// the loss says when, the attributions say on which feature — a genuine feature's gap alone, while the validation loss
/// still falls, is ordinary fitting and is not named. Runs only with a split-consistency check; a Caution unless the
/// policy's <c>haltOn</c> lists it.
/// </summary>
/// <param name="patience">Consecutive flagged epochs before a finding (the policy's patience).</param>
public sealed class OverfittedFeatureRule(int patience) : IFindingRule
{
    private readonly Streaks _streaks = new(patience);

    /// <summary>The overfitted-feature kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.OverfittedFeature,
        "overfitted feature",
        "A feature the model relies on more for training rows, whose column relates to the label the same way on both sides: overfitting on it, not a leak.",
        "gap",
        SeverityRule.PolicyDecides,
        EvaluationRole.Advisory,
        a => $"The model fits training rows on {a.Features} beyond what held-out rows support, but the data show no leak there: regularise, stop earlier or gather more rows; the divergence chart shows the gap.");

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
        if (run.Context.SplitCheck is null || s.ShareGapPValue.IsDefaultOrEmpty)
            return;
        var check = Reliance.Decided(run);
        var (byShare, byAlignment) = Reliance.Of(s, run.Policy);
        bool lossOverfits = epoch.GeneralisationLoss > run.Policy.GeneralisationLossThreshold;
        for (int f = 0; f < s.ShareGap.Length; f++)
        {
            var input = Reliance.CheckOf(run, check, f);
            bool overfitted = !run.IdentifierLike[f] && (byShare[f] || byAlignment[f]) && input is { Fails: false };
            if (_streaks.Observe(f, overfitted, epoch.Epoch) is not int since || !lossOverfits)
                continue;
            string name = run.FeatureName(f);
            string evidence = Reliance.Sentence(name, s, f, since, byShare[f], run.Policy.HalfExchangeResplits)
                + "; but its column relates to the label the same way in training and held-out rows (" + Reliance.CheckSentence(input!, check!)
                + "): the model overfits on this feature — not a leak";
            findings.Add(Reliance.Finding(Kind, run, s, f, byShare[f], new EpochSpan(since, epoch.Epoch), evidence));
        }
    }
}
