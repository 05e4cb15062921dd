using System.Collections.Immutable;
using DriftWatch.Attribution;

namespace DriftWatch.Detection.Rules;

/// <summary>
/// One finding kind: the rule that raises it and everything said about it — plain words, advice, family, severity and
/// evaluation role (its <see cref="Info"/>). The detector computes an epoch's statistics once and runs every registered
/// rule (<see cref="FindingRules"/>) over them at the rule's <see cref="Stage"/>.
/// </summary>
/// <remarks>A rule instance belongs to one detector and may keep memory across epochs (streaks, sums). Not thread-safe.</remarks>
public interface IFindingRule
{
    /// <summary>The kind this rule raises, with its words and advice.</summary>
    FindingKindInfo Info { get; }

    /// <summary>When in an epoch the rule reads it.</summary>
    RuleStage Stage { get; }

    /// <summary>Reads one epoch and adds its findings to <paramref name="findings"/> (which holds those of the rules before it).</summary>
    void Evaluate(EpochView epoch, IList<Finding> findings);
}

/// <summary>When in an epoch a rule reads it.</summary>
public enum RuleStage
{
    /// <summary>Raised by the monitor, not by the detector: the rule only describes the kind.</summary>
    Reported,

    /// <summary>Every epoch, before statistics are measured: metrics and the health of the map; may distrust the map.</summary>
    Health,

    /// <summary>Epochs whose map is trusted, from the first epoch after the policy's warm-up.</summary>
    Attribution,

    /// <summary>Every epoch, after the best-validation epoch is known: loss-based rules.</summary>
    Loss,
}

/// <summary>How the detector evaluation counts a kind's findings.</summary>
public enum EvaluationRole
{
    /// <summary>Names a feature as a fault (a leak, a memorised identifier): compared with the planted truth.</summary>
    NamesFault,

    /// <summary>The loss-based rule the attribution rules are compared with (generalisation loss).</summary>
    LossRule,

    /// <summary>Points at a feature to check but accuses none (a dominant feature).</summary>
    Advisory,

    /// <summary>About the monitoring itself (numerical trouble, a failed epoch), not about the model.</summary>
    Health,
}

/// <summary>Which verdict a kind's findings ask for.</summary>
public enum SeverityRule
{
    /// <summary>Halt when the policy's <c>haltOn</c> lists the kind, Caution otherwise.</summary>
    PolicyDecides,

    /// <summary>Always Caution, whatever the policy lists.</summary>
    AlwaysCaution,
}

/// <summary>What the advice of a kind may refer to.</summary>
/// <param name="Features">The features its findings name, quoted and comma-separated (empty for run-level kinds).</param>
/// <param name="BestEpoch">The epoch of the lowest validation loss, when known.</param>
public sealed record AdviceContext(string Features, int? BestEpoch);

/// <summary>Everything said about a finding kind, in one place.</summary>
/// <param name="Kind">The kind (its stored name).</param>
/// <param name="PlainWords">The kind in plain words, e.g. <c>memorised identifier</c>.</param>
/// <param name="Description">One sentence: what a finding of this kind means.</param>
/// <param name="Family">
/// Kinds that different attribution methods may name differently for the same feature share a family (<c>gap</c>,
/// <c>dominance</c>); null for kinds no cross-method comparison applies to.
/// </param>
/// <param name="Severity">Which verdict its findings ask for.</param>
/// <param name="Role">How the detector evaluation counts it.</param>
/// <param name="Advice">The report's next step for a run with findings of this kind.</param>
public sealed record FindingKindInfo(
    FindingKind Kind,
    string PlainWords,
    string Description,
    string? Family,
    SeverityRule Severity,
    EvaluationRole Role,
    Func<AdviceContext, string> Advice)
{
    /// <summary>Whether this version has a rule for the kind (false for a kind read from a newer store).</summary>
    public bool IsKnown { get; init; } = true;

    /// <summary>
    /// What a finding's <see cref="Finding.Size"/> and <see cref="Finding.NoiseFloor"/> are, and in which unit, so a table
    /// never shows a percentage threshold as if it were an attribution noise floor. Default: for the <c>gap</c> family, a
    /// training-minus-held-out gap of share or alignment against its noise floor; otherwise a statistic against its noise floor.
    /// </summary>
    public FindingMeasure Measure
    {
        get => field ?? (Family == "gap" ? FindingMeasure.Gap : FindingMeasure.Plain);
        init;
    }

    /// <summary>The severity a finding of this kind asks for under <paramref name="policy"/>.</summary>
    public VerdictKind SeverityUnder(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return Severity == SeverityRule.AlwaysCaution ? VerdictKind.Caution : policy.SeverityOf(Kind);
    }

    /// <summary>The description of a kind this version does not know (read from a store a newer version wrote).</summary>
    public static FindingKindInfo Unknown(FindingKind kind) => new(
        kind,
        $"a kind this version does not know ({kind.Name})",
        "A finding written by a newer version of DriftWatch; this version shows it as stored.",
        null,
        SeverityRule.AlwaysCaution,
        EvaluationRole.Advisory,
        _ => $"Some findings are of a kind this version does not know ({kind.Name}); read them with the version that wrote the store.")
    {
        IsKnown = false,
    };
}

/// <summary>What a finding kind's size and the value it is judged against measure, in words for people and in names for tables.</summary>
/// <param name="Size">What the size is, in words, e.g. <c>share or alignment gap</c> or <c>generalisation loss</c>.</param>
/// <param name="Against">What it is judged against, in words, e.g. <c>noise floor</c> or <c>threshold</c>.</param>
/// <param name="Symbol">The unit symbol both are written with, e.g. <c>%</c>; empty for a plain number.</param>
public sealed record FindingMeasure(string Size, string Against, string Symbol)
{
    /// <summary>
    /// The size's name in tables and JSON: <c>share_gap</c>, <c>alignment_gap</c>, <c>share_or_alignment_gap</c>, <c>lead</c>,
    /// <c>sign_agreement_lower_bound</c>, <c>generalisation_loss</c>, <c>relative_convergence_delta</c>, <c>statistic</c>, or <c>none</c>.
    /// </summary>
    public string Statistic { get; init; } = "statistic";

    /// <summary>
    /// The unit of the size and its bound in tables: <c>share</c> (fraction of attribution, 0 to 1), <c>alignment</c> (−1 to 1),
    /// <c>fraction</c> (of rows or of |F(x) − F(x′)|), <c>percent</c>, or empty when none applies.
    /// </summary>
    public string Unit { get; init; } = "";

    /// <summary>
    /// What <see cref="Finding.NoiseFloor"/> is in tables: <c>noise_floor</c> (the 90% bootstrap width of the statistic, which the
    /// rule multiplies by the policy's widths), <c>policy_bound</c> (a threshold taken from the policy), or <c>none</c>.
    /// </summary>
    public string Bound { get; init; } = "noise_floor";

    /// <summary>Whether the finding has a bound at all (false for <c>none</c>).</summary>
    public bool HasBound => Bound != "none";

    /// <summary>A training-minus-held-out gap of share or alignment (a fraction) against its row-bootstrap noise floor.</summary>
    public static FindingMeasure Gap { get; } = new("share or alignment gap", "noise floor", "") { Statistic = "share_or_alignment_gap" };

    /// <summary>No size: the finding is an event (a failed step), not a measurement.</summary>
    public static FindingMeasure None { get; } = new("", "", "") { Statistic = "none", Bound = "none" };

    /// <summary>A statistic against its noise floor, both plain numbers.</summary>
    public static FindingMeasure Plain { get; } = new("statistic", "noise floor", "");

    /// <summary>A value with its unit, e.g. <c>5.2 %</c> or <c>0.120</c>; <c>-</c> when not finite.</summary>
    public string Write(double value) =>
        !double.IsFinite(value) || Size.Length == 0 ? "-"
        : Symbol.Length == 0 ? value.ToString("0.000", System.Globalization.CultureInfo.InvariantCulture)
        : value.ToString("0.0", System.Globalization.CultureInfo.InvariantCulture) + " " + Symbol;
}

/// <summary>What every rule reads of one epoch: the run, the policy, the epoch's statistics and what came before.</summary>
public sealed class EpochView
{
    internal EpochView(DetectorRun run, int epoch, IReadOnlyDictionary<string, double> metrics, AttributionMap? map)
    {
        Run = run;
        Epoch = epoch;
        Metrics = metrics;
        Map = map;
    }

    /// <summary>What does not change between epochs: context, policy, probe halves, identifier-like features.</summary>
    public DetectorRun Run { get; }

    /// <summary>The epoch.</summary>
    public int Epoch { get; }

    /// <summary>Metrics by stored key.</summary>
    public IReadOnlyDictionary<string, double> Metrics { get; }

    /// <summary>The primary method's map, or null when the epoch was not attributed.</summary>
    public AttributionMap? Map { get; }

    /// <summary>Whether the map is there and no health rule distrusted it.</summary>
    public bool Trusted => Map is not null && !Distrusted;

    /// <summary>Whether a health rule found the map unusable.</summary>
    public bool Distrusted { get; private set; }

    /// <summary>The epoch's statistics; null before they are measured and for untrusted epochs.</summary>
    public EpochStatistics? Statistics { get; internal set; }

    /// <summary>Prechelt's generalisation loss GL in percent; NaN without a validation loss.</summary>
    public double GeneralisationLoss { get; internal init; } = double.NaN;

    /// <summary>The share gaps at the best-validation epoch so far (this one included once the loss stage runs), or empty.</summary>
    public ImmutableArray<double> BestShareGap { get; internal set; } = [];

    /// <summary>Marks the map as unusable for this epoch (a health rule's finding says why).</summary>
    public void Distrust() => Distrusted = true;
}

/// <summary>What does not change between a run's epochs, as the rules read it.</summary>
public sealed class DetectorRun
{
    internal DetectorRun(RunContext context, GatePolicy policy)
    {
        Context = context;
        Policy = policy;
        HeldOutRows = [.. Enumerable.Range(0, context.HeldOutCount)];
        TrainingRows = [.. Enumerable.Range(context.HeldOutCount, context.TrainingCount)];
        IdentifierLike = [.. Enumerable.Range(0, context.Schema.Count).Select(f => context.IsIdentifierLike(f, policy.IdentifierRareFraction))];
    }

    /// <summary>Schema, probe labels and categorical values, training value counts.</summary>
    public RunContext Context { get; }

    /// <summary>The gate's policy.</summary>
    public GatePolicy Policy { get; }

    /// <summary>Probe rows of the held-out half.</summary>
    public ImmutableArray<int> HeldOutRows { get; }

    /// <summary>Probe rows of the training half.</summary>
    public ImmutableArray<int> TrainingRows { get; }

    /// <summary>Per feature, whether it is treated as identifier-like.</summary>
    public ImmutableArray<bool> IdentifierLike { get; }

    /// <summary>The name of feature <paramref name="feature"/>.</summary>
    public string FeatureName(int feature) => Context.Schema.Features[feature].Name;
}
