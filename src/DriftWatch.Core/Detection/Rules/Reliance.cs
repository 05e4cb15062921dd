using DriftWatch.Model;
using DriftWatch.Probing;
using static DriftWatch.Detection.Rules.RuleText;

namespace DriftWatch.Detection.Rules;

/// <summary>
/// What the leak and overfitted-feature rules share: whether the model relies on a feature more for training rows (its share
/// or alignment gap beyond the half-exchange null, Benjamini–Hochberg across features), and what the split-consistency
/// check says of the feature's column.
/// </summary>
internal static class Reliance
{
    /// <summary>Per feature, whether the share gap and the alignment gap are each beyond the null at the policy's q (and its optional minimums).</summary>
    public static (bool[] ByShare, bool[] ByAlignment) Of(EpochStatistics s, GatePolicy policy)
    {
        int features = s.ShareGap.Length;
        var share = MultipleTesting.BenjaminiHochberg(s.ShareGapPValue.IsDefaultOrEmpty ? new double[features] : [.. s.ShareGapPValue], policy.RelianceFalseDiscoveryRate);
        bool aligned = !s.AlignmentGapPValue.IsDefaultOrEmpty && s.AlignmentGap.Length == features;
        var alignment = aligned ? MultipleTesting.BenjaminiHochberg([.. s.AlignmentGapPValue], policy.RelianceFalseDiscoveryRate) : [.. new bool[features]];
        var byShare = new bool[features];
        var byAlignment = new bool[features];
        for (int f = 0; f < features; f++)
        {
            bool enough = s.ShareTraining[f] >= policy.RelianceMinimumShare;
            byShare[f] = !s.ShareGapPValue.IsDefaultOrEmpty && share[f] && s.ShareGap[f] > 0 && enough;
            byAlignment[f] = aligned && alignment[f] && s.AlignmentGap[f] > 0 && s.AlignmentGap[f] >= policy.RelianceMinimumAlignmentGap && enough;
        }
        return (byShare, byAlignment);
    }

    /// <summary>The run's split-consistency check decided at the policy's q and effect-size bound; null without one.</summary>
    public static SplitCheckResult? Decided(DetectorRun run) =>
        run.Context.SplitCheck?.DecidedAt(run.Policy.SplitCheckFalseDiscoveryRate, run.Policy.SplitCheckMinimumGap);

    /// <summary>The check's result for feature <paramref name="feature"/>'s raw input, or null.</summary>
    public static SplitCheckInput? CheckOf(DetectorRun run, SplitCheckResult? check, int feature)
    {
        if (check is null)
            return null;
        var schema = run.Context.Schema;
        var definition = schema.Features[feature];
        int position = schema.Features.Take(feature).Count(f => f.Kind == definition.Kind);
        return check.Find(definition.Kind == FeatureKind.Dense ? RawInputKind.Dense : RawInputKind.Categorical, position);
    }

    /// <summary>A finding of <paramref name="kind"/> on feature <paramref name="f"/>, sized by the gap the reliance test read (share or alignment) against its noise floor.</summary>
    public static Finding Finding(FindingKindInfo kind, DetectorRun run, EpochStatistics s, int f, bool byShare, EpochSpan span, string evidence) =>
        new(kind.Kind, kind.SeverityUnder(run.Policy), run.FeatureName(f),
            byShare ? s.ShareGap[f] : s.AlignmentGap[f], byShare ? s.ShareGapWidth[f] : s.AlignmentGapWidth[f], span, evidence);

    /// <summary>What the attributions say: the gap the null rejected, with its p-value, since when.</summary>
    public static string Sentence(string name, EpochStatistics s, int f, int since, bool byShare, int resplits) => byShare
        ? Format($"the model relies on '{name}' more for training rows: {s.ShareTraining[f]:P1} of attribution there against {s.ShareHeldOut[f]:P1} on held-out rows ")
            + Format($"(gap {s.ShareGap[f]:+0.000;-0.000}, p = {s.ShareGapPValue[f]:0.####} over {resplits:N0} half exchanges) since epoch {since}")
        : Format($"the model relies on '{name}' more for training rows: it points at the true label there (alignment {s.AlignmentTraining[f]:+0.00;-0.00}) ")
            + Format($"more than on held-out rows ({s.AlignmentHeldOut[f]:+0.00;-0.00}; gap p = {s.AlignmentGapPValue[f]:0.####} over {resplits:N0} half exchanges), ")
            + Format($"with {s.ShareTraining[f]:P1} of training attribution, since epoch {since}");

    /// <summary>What the data say of the feature's column.</summary>
    public static string CheckSentence(SplitCheckInput input, SplitCheckResult check) =>
        Format($"out-of-fold AUC {input.TrainingScore:0.00} on training rows against {input.HeldOutScore:0.00} on held-out rows, gap {input.Gap:+0.00;-0.00}, ")
        + Format($"p = {input.PValue:0.####} over {check.Permutations:N0} side exchanges of {check.TrainingRowsUsed:N0} + {check.HeldOutRowsUsed:N0} rows");
}
