namespace DriftWatch.Detection.Rules;

/// <summary>
/// <b>Monitoring failure</b>: a step of the monitor failed at an epoch and the training went on. The monitor raises these
/// findings (<see cref="Failure"/>); the detector passes them into the verdict.
/// </summary>
public sealed class MonitoringFailureRule : IFindingRule
{
    /// <summary>The monitoring-failure kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.MonitoringFailure,
        "monitoring failure",
        "Monitoring itself failed at this epoch; the training went on.",
        null,
        SeverityRule.AlwaysCaution,
        EvaluationRole.Health,
        _ => NumericalTroubleRule.HealthAdvice)
    {
        Measure = FindingMeasure.None,
    };

    /// <inheritdoc/>
    public FindingKindInfo Info => Kind;

    /// <inheritdoc/>
    public RuleStage Stage => RuleStage.Reported;

    /// <inheritdoc/>
    public void Evaluate(EpochView epoch, IList<Finding> findings)
    {
        // Raised by the monitor and handed to the detector with the epoch; nothing to compute here.
    }

    /// <summary>A monitoring failure at <paramref name="epoch"/>, its evidence being <paramref name="problem"/>.</summary>
    public static Finding Failure(int epoch, string problem)
    {
        ArgumentNullException.ThrowIfNull(problem);
        return new Finding(FindingKind.MonitoringFailure, VerdictKind.Caution, "", 0, 0, EpochSpan.At(epoch), problem);
    }
}
