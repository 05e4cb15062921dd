using static DriftWatch.Detection.Rules.RuleText;

namespace DriftWatch.Detection.Rules;

/// <summary>The probable-leak rule's settings, read from the policy.</summary>
/// <param name="PurityLowerBound">
/// The one-sided 95% Wilson lower bound of how often the feature's attribution points at the true label, over both halves,
/// must reach this, and so must the plain share on held-out rows (policy <c>purityLowerBound</c>).
/// </param>
public sealed record ProbableLeakSettings(double PurityLowerBound)
{
    /// <summary>The settings a policy gives.</summary>
    public static ProbableLeakSettings From(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return new(policy.PurityLowerBound);
    }
}

/// <summary>
/// <b>Probable leak</b>: a dominant categorical (this epoch's <see cref="DominantFeatureRule"/> finding) whose attribution
/// points at the true label on nearly every probe row, held-out rows included. Replaces that dominant-feature finding.
/// </summary>
/// <param name="settings">What the rule reads from the policy.</param>
public sealed class ProbableLeakRule(ProbableLeakSettings settings) : IFindingRule
{
    private const double OneSided95 = 1.645; // the normal quantile of a one-sided 95% lower bound
    private readonly ProbableLeakSettings _settings = settings ?? throw new ArgumentNullException(nameof(settings));

    /// <summary>The probable-leak kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.ProbableLeak,
        "probable leak",
        "A dominant categorical with a value that nearly fixes the label on held-out rows.",
        "dominance",
        SeverityRule.PolicyDecides,
        EvaluationRole.NamesFault,
        a => $"Check whether {a.Features} is derived from the label: it nearly fixes the label on held-out rows too, a pipeline fault the validation loss cannot show.")
    {
        Measure = new FindingMeasure("purity lower bound (share of probe rows)", "required bound", "") { Statistic = "sign_agreement_lower_bound", Unit = "fraction", Bound = "policy_bound" },
    };

    private static string Sentence(string name, double share, double next, PurityResult pure) =>
        Format($"'{name}' decides on both halves ({share:P1} held-out share, next {next:P1}), ")
        + Format($"and its attribution points at the true label in {pure.Agree} of {pure.Rows} probe rows across {pure.Values} values ")
        + Format($"({pure.HeldOutAgree} of {pure.HeldOutRows} held-out; one-sided 95% Wilson lower bound {pure.LowerBound:0.00}): ")
        + "a categorical whose values nearly fix the label suggests a leak present in validation data too, which the loss cannot show";

    /// <inheritdoc/>
    public FindingKindInfo Info => Kind;

    /// <inheritdoc/>
    public RuleStage Stage => RuleStage.Attribution;

    /// <inheritdoc/>
    public void Evaluate(EpochView epoch, IList<Finding> findings)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        ArgumentNullException.ThrowIfNull(findings);
        int at = -1;
        for (int i = 0; i < findings.Count && at < 0; i++)
        {
            if (findings[i].Kind == FindingKind.DominantFeature)
                at = i;
        }
        if (at < 0)
            return;
        var s = epoch.Statistics!;
        int top = DominantFeatureRule.Top(s.ShareHeldOut, -1);
        int runnerUp = DominantFeatureRule.Top(s.ShareHeldOut, top);
        if (Purity(epoch.Run, top, epoch.Map!) is not { } pure || pure.LowerBound < _settings.PurityLowerBound || pure.HeldOutShare < _settings.PurityLowerBound)
            return;
        string name = epoch.Run.FeatureName(top);
        var dominance = findings[at];
        findings.RemoveAt(at);
        findings.Add(new Finding(FindingKind.ProbableLeak, Kind.SeverityUnder(epoch.Run.Policy), name, pure.LowerBound, _settings.PurityLowerBound, dominance.Epochs,
            Sentence(name, s.ShareHeldOut[top], s.ShareHeldOut[runnerUp], pure)));
    }

    private sealed record PurityResult(int Agree, int Rows, int HeldOutAgree, int HeldOutRows, int Values, double LowerBound)
    {
        public double HeldOutShare => HeldOutRows == 0 ? 0 : (double)HeldOutAgree / HeldOutRows;
    }

    // For a categorical feature: over the whole probe set (both halves), how often the sign of the feature's attribution
    // agrees with the direction the row's label points (RunContext.AlignmentSigns: ±1 binary labels, one-vs-rest for one
    // class's output, +1 towards the row's own class for the true-class target, the side of the median for a continuous
    // target), with its one-sided 95% Wilson lower bound. The rule runs only when the feature
    // decides on both halves, so both halves are evidence of the same property: a leak makes every value point at the
    // label; a genuine feature, however strong, has values whose effect is weak or is overruled by other features.
    // Pooling doubles the rows behind the bound; the held-out half alone must also reach it (as a plain share), so a
    // feature that fixes the label only on memorised training rows cannot pass on the training half's strength.
    private static PurityResult? Purity(DetectorRun run, int feature, Attribution.AttributionMap map)
    {
        var context = run.Context;
        if (context.CategoricalInput[feature] < 0 || context.AlignmentSigns is null)
            return null;
        var values = new HashSet<long>();
        int Agreeing(IEnumerable<int> rows)
        {
            int agree = 0;
            foreach (int row in rows)
            {
                values.Add(context.IdOf(row, feature));
                if (map[row, feature] * context.AlignmentSigns!.Value[row] > 0)
                    agree++;
            }
            return agree;
        }
        int heldOut = Agreeing(run.HeldOutRows);
        int training = Agreeing(run.TrainingRows);
        int rows = run.HeldOutRows.Length + run.TrainingRows.Length;
        return run.HeldOutRows.Length == 0
            ? null
            : new PurityResult(heldOut + training, rows, heldOut, run.HeldOutRows.Length, values.Count, Statistics.WilsonLowerBound(heldOut + training, rows, OneSided95));
    }
}
