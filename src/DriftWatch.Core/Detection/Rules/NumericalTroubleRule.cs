using static DriftWatch.Detection.Rules.RuleText;

namespace DriftWatch.Detection.Rules;

/// <summary>The numerical-trouble rule's settings, read from the policy.</summary>
/// <param name="DeltaTolerance">Mean convergence delta, as a fraction of mean |F(x) − F(x′)|, beyond which a map is not trusted (policy <c>deltaTolerance</c>).</param>
public sealed record NumericalTroubleSettings(double DeltaTolerance)
{
    /// <summary>The settings a policy gives.</summary>
    public static NumericalTroubleSettings From(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return new(policy.DeltaTolerance);
    }
}

/// <summary>
/// <b>Numerical trouble</b>: a metric that is NaN or infinite; attribution scores that are; or a mean convergence delta
/// beyond the policy's tolerance. The last two distrust the epoch's map, so no attribution rule reads it.
/// </summary>
/// <param name="settings">What the rule reads from the policy.</param>
public sealed class NumericalTroubleRule(NumericalTroubleSettings settings) : IFindingRule
{
    private readonly NumericalTroubleSettings _settings = settings ?? throw new ArgumentNullException(nameof(settings));

    /// <summary>The numerical-trouble kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.NumericalTrouble,
        "numerical trouble",
        "NaN or Inf in losses or attributions, or convergence deltas beyond tolerance.",
        null,
        SeverityRule.AlwaysCaution,
        EvaluationRole.Health,
        _ => HealthAdvice);

    /// <summary>The report's step for epochs with numerical trouble or a monitoring failure (one step for both).</summary>
    internal const string HealthAdvice = "Some epochs had numerical trouble or a monitoring failure; their attributions are not trusted ('driftwatch show' lists the problems).";

    /// <inheritdoc/>
    public FindingKindInfo Info => Kind;

    /// <inheritdoc/>
    public RuleStage Stage => RuleStage.Health;

    /// <inheritdoc/>
    public void Evaluate(EpochView epoch, IList<Finding> findings)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        ArgumentNullException.ThrowIfNull(findings);
        var severity = Kind.SeverityUnder(epoch.Run.Policy);
        foreach (var (name, value) in epoch.Metrics.OrderBy(m => m.Key, StringComparer.Ordinal))
        {
            if (!double.IsFinite(value))
                findings.Add(new Finding(FindingKind.NumericalTrouble, severity, "", value, 0, EpochSpan.At(epoch.Epoch), Format($"metric '{name}' is {value} at epoch {epoch.Epoch}")));
        }
        if (epoch.Map is not { } map)
            return;
        int bad = map.Scores.Count(v => !float.IsFinite(v));
        if (bad > 0)
        {
            findings.Add(new Finding(FindingKind.NumericalTrouble, severity, "", bad, 0, EpochSpan.At(epoch.Epoch),
                Format($"{bad} of {map.Scores.Length} attribution scores are NaN or infinite at epoch {epoch.Epoch}; this epoch's maps are not trusted")));
            epoch.Distrust();
            return;
        }
        if (map.RelativeMeanDelta() is double relative && relative > _settings.DeltaTolerance)
        {
            findings.Add(new Finding(FindingKind.NumericalTrouble, severity, "", relative, _settings.DeltaTolerance, EpochSpan.At(epoch.Epoch),
                Format($"mean convergence delta is {relative:P1} of mean |F(x) − F(x′)| at epoch {epoch.Epoch}, above {_settings.DeltaTolerance:P0}; ")
                + "use more steps — this epoch's maps are not trusted"));
            epoch.Distrust();
        }
    }
}
