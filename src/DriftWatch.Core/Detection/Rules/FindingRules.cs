using System.Collections.Immutable;

namespace DriftWatch.Detection.Rules;

/// <summary>
/// The registered finding rules, one per kind, in verdict order. Adding a kind is one rule class (its
/// <see cref="FindingKindInfo"/> and its settings record beside it), one line here, and its test.
/// </summary>
public static class FindingRules
{
    private static readonly ImmutableArray<(FindingKindInfo Info, Func<GatePolicy, IFindingRule> Create)> Registered =
    [
        (LeakRule.Kind, p => new LeakRule(LeakSettings.From(p), p.Patience)),
        (MemorisedIdentifierRule.Kind, p => new MemorisedIdentifierRule(MemorisedIdentifierSettings.From(p), p.Patience)),
        (OverfittedFeatureRule.Kind, p => new OverfittedFeatureRule(p.Patience)),
        (DominantFeatureRule.Kind, p => new DominantFeatureRule(DominantFeatureSettings.From(p), p.Patience)),
        (ProbableLeakRule.Kind, p => new ProbableLeakRule(ProbableLeakSettings.From(p))),
        (SplitInconsistencyRule.Kind, _ => new SplitInconsistencyRule()),
        (OverfittingRule.Kind, p => new OverfittingRule(OverfittingSettings.From(p))),
        (NumericalTroubleRule.Kind, p => new NumericalTroubleRule(NumericalTroubleSettings.From(p))),
        (MonitoringFailureRule.Kind, _ => new MonitoringFailureRule()),
    ];

    /// <summary>Every kind this version knows, in verdict order.</summary>
    public static ImmutableArray<FindingKindInfo> Kinds { get; } = [.. Registered.Select(r => r.Info)];

    /// <summary>A fresh set of rules for one detector under <paramref name="policy"/>, in verdict order.</summary>
    public static ImmutableArray<IFindingRule> Create(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return [.. Registered.Select(r => r.Create(policy))];
    }

    /// <summary>The description of a kind this version knows, or null.</summary>
    public static FindingKindInfo? Find(FindingKind kind)
    {
        int index = IndexOf(kind);
        return index < 0 ? null : Kinds[index];
    }

    /// <summary>The kind's place in verdict order, or −1 when this version does not know it.</summary>
    public static int IndexOf(FindingKind kind)
    {
        var kinds = Kinds;
        for (int i = 0; i < kinds.Length; i++)
        {
            if (kinds[i].Kind == kind)
                return i;
        }
        return -1;
    }
}
