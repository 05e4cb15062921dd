using static DriftWatch.Detection.Rules.RuleText;

namespace DriftWatch.Detection.Rules;

/// <summary>The overfitting rule's settings, read from the policy.</summary>
/// <param name="GeneralisationLossThreshold">Prechelt's α in percent: overfitting when GL(t) &gt; α (policy <c>generalisationLossThreshold</c>).</param>
public sealed record OverfittingSettings(double GeneralisationLossThreshold)
{
    /// <summary>The settings a policy gives.</summary>
    public static OverfittingSettings From(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return new(policy.GeneralisationLossThreshold);
    }
}

/// <summary>
/// <b>Overfitting</b>: Prechelt's generalisation loss GL above the policy's threshold (Prechelt 1998). Its diagnosis tells
/// one story with the epoch's other findings: when they name features it points to those and nothing else; when none
/// does, it names the features whose training/held-out share gap widened since the best-validation epoch, or says the
/// overfitting is diffuse. Its span runs from the first epoch of the current stretch above the threshold.
/// </summary>
/// <param name="settings">What the rule reads from the policy.</param>
public sealed class OverfittingRule(OverfittingSettings settings) : IFindingRule
{
    private readonly OverfittingSettings _settings = settings ?? throw new ArgumentNullException(nameof(settings));
    private int? _since;

    /// <summary>The overfitting kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.Overfitting,
        "overfitting",
        "Validation loss has risen beyond the policy's generalisation-loss threshold.",
        null,
        SeverityRule.PolicyDecides,
        EvaluationRole.LossRule,
        a => a.BestEpoch is int best
            ? $"Validation loss rose past the policy's threshold: the lowest was at epoch {best.ToString(System.Globalization.CultureInfo.InvariantCulture)}, whose snapshot the store keeps."
            : "Validation loss rose past the policy's threshold: consider the weights of the epoch with the lowest validation loss.")
    {
        Measure = new FindingMeasure("generalisation loss", "threshold", "%") { Statistic = "generalisation_loss", Unit = "percent", Bound = "policy_bound" },
    };

    /// <inheritdoc/>
    public FindingKindInfo Info => Kind;

    /// <inheritdoc/>
    public RuleStage Stage => RuleStage.Loss;

    /// <inheritdoc/>
    public void Evaluate(EpochView epoch, IList<Finding> findings)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        ArgumentNullException.ThrowIfNull(findings);
        double gl = epoch.GeneralisationLoss;
        if (!(gl > _settings.GeneralisationLossThreshold))
        {
            _since = null;
            return;
        }
        _since ??= epoch.Epoch;
        string diagnosis = "";
        var s = epoch.Trusted ? epoch.Statistics : null;
        var best = epoch.BestShareGap;
        var named = findings.Where(f => f.Feature.Length > 0).ToList();
        if (named.Count > 0)
        {
            // The features the epoch's other findings name are the diagnosis; no second, unrelated list beside them.
            diagnosis = "; see the findings on " + string.Join(", ", named
                .GroupBy(f => f.Feature)
                .Select(g => $"'{g.Key}' ({string.Join(", ", g.Select(f => f.Kind.Info.PlainWords).Distinct())})"))
                + " at this epoch";
        }
        else if (s is not null && !best.IsDefaultOrEmpty)
        {
            var widened = Enumerable.Range(0, s.ShareGap.Length)
                .Where(f => s.ShareGap[f] - best[f] > s.ShareGapWidth[f])
                .OrderByDescending(f => s.ShareGap[f] - best[f])
                .Take(3)
                .Select(f => Format($"'{epoch.Run.FeatureName(f)}' (gap {best[f]:+0.000;-0.000} → {s.ShareGap[f]:+0.000;-0.000})"))
                .ToList();
            diagnosis = widened.Count == 0
                ? "; no feature's training/held-out gap widened beyond its noise floor — the overfitting is diffuse"
                : "; features whose training/held-out gap widened since the best epoch: " + string.Join(", ", widened);
        }
        findings.Add(new Finding(FindingKind.Overfitting, Kind.SeverityUnder(epoch.Run.Policy), "", gl, _settings.GeneralisationLossThreshold, new EpochSpan(_since.Value, epoch.Epoch),
            Format($"validation loss is {gl:0.0}% above its best so far (generalisation loss, threshold {_settings.GeneralisationLossThreshold:0.#}%; above it since epoch {_since.Value})") + diagnosis));
    }
}
