using System.Collections.Immutable;
using System.Globalization;
using DriftWatch.Detection;
using DriftWatch.Detection.Rules;

namespace DriftWatch.Charts;

/// <summary>One line of an evidence panel: a value per epoch (null where there is none).</summary>
/// <param name="Label">The legend entry.</param>
/// <param name="Value">The value at an epoch, or null.</param>
/// <param name="Role">Which look the line takes.</param>
internal sealed record EvidenceLine(string Label, Func<EpochRecord, double?> Value, EvidenceRole Role);

/// <summary>What a line of an evidence panel is, so every evidence chart draws the same thing the same way.</summary>
internal enum EvidenceRole
{
    /// <summary>The statistic the rule judges: a thick line in the first series colour.</summary>
    Statistic,

    /// <summary>The held-out half's part of it: a thin line in the held-out colour.</summary>
    HeldOut,

    /// <summary>The training half's part of it: a thin dashed line in the training colour.</summary>
    Training,

    /// <summary>The bound or decision line the rule compares with: dark and dotted.</summary>
    Bound,

    /// <summary>The held-out half's own bound: dotted in the held-out colour.</summary>
    HeldOutBound,

    /// <summary>The training half's own bound: dotted in the training colour.</summary>
    TrainingBound,
}

/// <summary>One panel of an evidence chart.</summary>
/// <param name="Title">What the panel shows.</param>
/// <param name="YLabel">The y axis.</param>
/// <param name="Lines">Its lines.</param>
/// <param name="Band">A noise band (label and lower, upper per epoch), or null.</param>
/// <param name="Fires">How the rule reads the panel, e.g. <c>fires above the dotted line</c>; shown in the legend.</param>
internal sealed record EvidencePanel(
    string Title,
    string YLabel,
    IReadOnlyList<EvidenceLine> Lines,
    (string Label, Func<EpochRecord, (double Lower, double Upper)?> Value)? Band,
    string Fires);

/// <summary>What an evidence chart of one kind is drawn from.</summary>
/// <param name="History">The run.</param>
/// <param name="Policy">The gate policy the run was judged under (the default when none was stored).</param>
/// <param name="Feature">The feature the findings name, or −1 for run-level kinds.</param>
/// <param name="Findings">Per epoch, the findings of the kind (for the feature, when there is one).</param>
internal sealed record EvidenceInput(RunHistory History, GatePolicy Policy, int Feature, IReadOnlyDictionary<int, ImmutableArray<Finding>> Findings);

/// <summary>How the evidence chart of one finding kind is drawn.</summary>
/// <param name="Statistic">The statistic its rule judges, in a few words (the chart's subtitle).</param>
/// <param name="NamesFeature">Whether its findings name a feature.</param>
/// <param name="NeedsRows">Whether it reads per-row attributions of the feature (loaded before rendering).</param>
/// <param name="Panels">The panels, top to bottom.</param>
/// <param name="ListsReasons">Whether the chart lists the findings' reasons beneath its title (kinds with no statistic to draw).</param>
internal sealed record EvidencePlan(string Statistic, bool NamesFeature, bool NeedsRows, Func<EvidenceInput, IReadOnlyList<EvidencePanel>> Panels, bool ListsReasons = false);

/// <summary>
/// Every finding kind's evidence chart, keyed by kind, in one place: the statistic its rule judges, per half where it has
/// halves, against its null band or bound. A new kind adds one entry here (a test fails for a registered kind without one).
/// Each entry reads what its rule in <c>DriftWatch.Detection.Rules</c> computes, from the stored statistics.
/// </summary>
internal static class EvidencePlans
{
    /// <summary>The plans, by kind.</summary>
    public static IReadOnlyDictionary<FindingKind, EvidencePlan> ByKind { get; } = new Dictionary<FindingKind, EvidencePlan>
    {
        [FindingKind.Leak] = new("reliance on the training half (half-exchange null, Benjamini–Hochberg across features) where the run has a split check; label-alignment gap and share gap against their noise floors", true, false, Leak),
        [FindingKind.OverfittedFeature] = new("reliance on the training half (half-exchange null, Benjamini–Hochberg across features), and the generalisation loss that must also exceed α", true, false, OverfittedFeature),
        [FindingKind.SplitInconsistency] = new("the epochs the data note covers and what the split check found (it is measured once, on the rows the probe was chosen from)", true, false, Health, ListsReasons: true),
        [FindingKind.MemorisedIdentifier] = new("label-alignment gap against its noise floor, and its CUSUM in standard errors against the decision line", true, false, MemorisedIdentifier),
        [FindingKind.DominantFeature] = new("lead over the next feature on each half against its noise floor × the policy's width", true, false, Dominance),
        [FindingKind.ProbableLeak] = new("how often the attribution's sign agrees with the label, per half, and the pooled one-sided 95% Wilson lower bound against the policy's bound", true, true, ProbableLeak),
        [FindingKind.Overfitting] = new("generalisation loss GL against the policy's threshold α", false, false, Overfitting),
        [FindingKind.NumericalTrouble] = new("the epochs with numerical trouble and what was wrong", false, false, Health, ListsReasons: true),
        [FindingKind.MonitoringFailure] = new("the epochs where monitoring failed and what failed", false, false, Health, ListsReasons: true),
    };

    /// <summary>The plan of <paramref name="kind"/>, or null for a kind this version has no chart for.</summary>
    public static EvidencePlan? For(FindingKind kind) => ByKind.GetValueOrDefault(kind);

    private static string Number(double value, string format = "0.##") => value.ToString(format, CultureInfo.InvariantCulture);

    private static EvidenceLine Of(string label, Func<EpochStatistics, double> value, EvidenceRole role, double scale = 1) =>
        new(label, e => e.Statistics is { Trusted: true } s ? value(s) * scale : null, role);

    // The halves' own values come from the epoch's map, as the detector's statistics do (for the method it reads): they
    // are drawn for any method and for runs that stored no statistics; bounds need the stored noise floors.
    private static EvidenceLine Alignment(string label, int f, bool training, EvidenceRole role) =>
        new(label, e => (training ? e.TrainingAlignment : e.HeldOutAlignment) is { Length: > 0 } a && a.Length > f ? a[f] : null, role);

    private static EvidenceLine AlignmentGap(int f) =>
        new("alignment gap (training − held-out)", e => e.TrainingAlignment.Length > f && e.HeldOutAlignment.Length > f ? e.TrainingAlignment[f] - e.HeldOutAlignment[f] : null, EvidenceRole.Statistic);

    // −log10 of the Benjamini–Hochberg adjusted p-value of the half-exchange null, per gap: the rule's reliance test rejects
    // exactly when the line is above −log10 q (and the gap is positive).
    private static EvidenceLine Reliance(string label, int f, Func<EpochStatistics, ImmutableArray<double>> pValues, EvidenceRole role) =>
        new(label, e => e.Statistics is { Trusted: true } s && pValues(s) is { IsDefaultOrEmpty: false } p && p.Length > f
            && MultipleTesting.BenjaminiHochbergAdjusted([.. p])[f] is var q && double.IsFinite(q) ? -Math.Log10(Math.Max(q, 1e-12)) : null, role);

    private static bool HasReliance(RunHistory history) =>
        history.Epochs.Any(e => e.Statistics is { Trusted: true } s && !s.ShareGapPValue.IsDefaultOrEmpty);

    private static EvidencePanel ReliancePanel(GatePolicy p, int f) => new(
        "reliance on the training half: half-exchange null",
        "−log10 adjusted p",
        [
            Reliance("share gap", f, s => s.ShareGapPValue, EvidenceRole.Statistic),
            Reliance("alignment gap", f, s => s.AlignmentGapPValue, EvidenceRole.Training),
            new($"bound: −log10 q = −log10 {Number(p.RelianceFalseDiscoveryRate)}", e => e.Statistics is { Trusted: true } ? -Math.Log10(p.RelianceFalseDiscoveryRate) : null, EvidenceRole.Bound),
        ],
        null,
        $"relies: a line above the bound (with a positive gap) for {Patience(p)}");

    private static IReadOnlyList<EvidencePanel> OverfittedFeature(EvidenceInput input)
    {
        var panels = new List<EvidencePanel>();
        if (HasReliance(input.History))
            panels.Add(ReliancePanel(input.Policy, input.Feature));
        panels.AddRange(Overfitting(input));
        return panels;
    }

    private static IReadOnlyList<EvidencePanel> Leak(EvidenceInput input)
    {
        var p = input.Policy;
        int f = input.Feature;
        var panels = new List<EvidencePanel>();
        if (HasReliance(input.History))
            panels.Add(ReliancePanel(p, f));
        if (HasAlignment(input.History, f))
        {
            panels.Add(new EvidencePanel(
                "label alignment: training half against held-out half",
                "label alignment",
                [
                    AlignmentGap(f),
                    Alignment("held-out alignment", f, training: false, EvidenceRole.HeldOut),
                    Alignment("training alignment", f, training: true, EvidenceRole.Training),
                    Of($"bound: max({Number(p.LeakAlignmentWidths)} × noise floor, {Number(p.LeakMinimumAlignmentGap)})",
                        s => Math.Max(p.LeakAlignmentWidths * s.AlignmentGapWidth[f], p.LeakMinimumAlignmentGap), EvidenceRole.Bound),
                ],
                ("noise floor: ±90% bootstrap width", e => e.Statistics is { Trusted: true } s && s.AlignmentGapWidth.Length > f ? (-s.AlignmentGapWidth[f], s.AlignmentGapWidth[f]) : null),
                $"fires: gap above the bound for {Patience(p)}, with ≥ {Number(p.LeakMinimumShare * 100, "0.#")}% of training attribution"));
        }
        panels.Add(new EvidencePanel(
            "share of importance: training half minus held-out half",
            "share gap (points of %)",
            [
                new("share gap (training − held-out)", e => e.IsAttributed ? (e.TrainingShare[f] - e.HeldOutShare[f]) * 100 : null, EvidenceRole.Statistic),
                Of($"bound: max({Number(p.LeakWidths)} × noise floor, {Number(p.LeakMinimumGap * 100)} points)",
                    s => Math.Max(p.LeakWidths * s.ShareGapWidth[f], p.LeakMinimumGap), EvidenceRole.Bound, 100),
            ],
            ("noise floor: ±90% bootstrap width", e => e.Statistics is { Trusted: true } s && s.ShareGapWidth.Length > f ? (-s.ShareGapWidth[f] * 100, s.ShareGapWidth[f] * 100) : null),
            $"fires: gap above the bound for {Patience(p)}"));
        return panels;
    }

    private static IReadOnlyList<EvidencePanel> MemorisedIdentifier(EvidenceInput input)
    {
        var p = input.Policy;
        int f = input.Feature;
        if (!HasAlignment(input.History, f))
            return [Unavailable("label alignment", "no label alignment stored (labels not binary)")];
        var cusum = Cusum(input.History, f, p);
        var panels = new List<EvidencePanel>
        {
            new EvidencePanel(
                "label alignment: training half against held-out half",
                "label alignment",
                [
                    AlignmentGap(f),
                    Alignment("held-out alignment", f, training: false, EvidenceRole.HeldOut),
                    Alignment("training alignment", f, training: true, EvidenceRole.Training),
                    Of($"bound: {Number(p.IdentifierWidths)} × noise floor", s => p.IdentifierWidths * s.AlignmentGapWidth[f], EvidenceRole.Bound),
                ],
                ("noise floor: ±90% bootstrap width", e => e.Statistics is { Trusted: true } s && s.AlignmentGapWidth.Length > f ? (-s.AlignmentGapWidth[f], s.AlignmentGapWidth[f]) : null),
                $"fires: gap above the bound for {Patience(p)}"),
            new EvidencePanel(
                "the gap accumulated: one-sided CUSUM in standard errors (Page 1954)",
                "CUSUM (standard errors)",
                [
                    new("CUSUM of the gap", e => cusum.TryGetValue(e.Epoch, out double v) ? v : null, EvidenceRole.Statistic),
                    new($"decision line H = {Number(p.IdentifierCusumThreshold)} (allowance K = {Number(p.IdentifierCusumAllowance)})", e => cusum.ContainsKey(e.Epoch) ? p.IdentifierCusumThreshold : null, EvidenceRole.Bound),
                ],
                null,
                "fires: sum above the decision line"),
        };
        return panels;
    }

    private static IReadOnlyList<EvidencePanel> Dominance(EvidenceInput input) => [DominancePanel(input)];

    private static EvidencePanel DominancePanel(EvidenceInput input)
    {
        var p = input.Policy;
        int f = input.Feature;
        static double Lead(ImmutableArray<double> share, int f) =>
            share[f] - Enumerable.Range(0, share.Length).Where(o => o != f).Select(o => share[o]).DefaultIfEmpty(0).Max();
        return new EvidencePanel(
            "lead over the next feature's share",
            "lead (points of %)",
            [
                new("held-out lead", e => e.IsAttributed ? Lead(e.HeldOutShare, f) * 100 : null, EvidenceRole.HeldOut),
                new("training lead", e => e.IsAttributed ? Lead(e.TrainingShare, f) * 100 : null, EvidenceRole.Training),
                Of($"held-out bound: {Number(p.DominanceWidths)} × noise floor", s => p.DominanceWidths * s.LeadWidthHeldOut, EvidenceRole.HeldOutBound, 100),
                Of($"training bound: {Number(p.DominanceWidths)} × noise floor", s => p.DominanceWidths * s.LeadWidthTraining, EvidenceRole.TrainingBound, 100),
            ],
            null,
            $"fires: top on both halves, each lead above its bound, for {Patience(p)}");
    }

    private static IReadOnlyList<EvidencePanel> ProbableLeak(EvidenceInput input)
    {
        var p = input.Policy;
        var agreement = Agreement(input.History, input.Feature);
        // Where per-row scores are missing, the findings' own bound is still there for the epochs they were raised.
        var fired = input.Findings.ToDictionary(kv => kv.Key, kv => kv.Value.Max(f => f.Size));
        EvidencePanel purity = new(
            "attribution sign agrees with the label",
            "share of probe rows",
            [
                new("pooled one-sided 95% Wilson lower bound", e => agreement.TryGetValue(e.Epoch, out var a) ? a.Lower : fired.TryGetValue(e.Epoch, out double v) ? v : null, EvidenceRole.Statistic),
                new("held-out rows agreeing", e => agreement.TryGetValue(e.Epoch, out var a) ? a.HeldOut : null, EvidenceRole.HeldOut),
                new("training rows agreeing", e => agreement.TryGetValue(e.Epoch, out var a) ? a.Training : null, EvidenceRole.Training),
                new($"bound: {Number(p.PurityLowerBound)}", e => e.IsAttributed ? p.PurityLowerBound : null, EvidenceRole.Bound),
            ],
            null,
            "fires on a dominant categorical: Wilson bound and held-out share both at the bound or above");
        return [purity, DominancePanel(input)];
    }

    private static IReadOnlyList<EvidencePanel> Overfitting(EvidenceInput input)
    {
        var p = input.Policy;
        var history = input.History;
        var withLoss = history.Epochs.Where(e => e.ValidationLoss is double v && double.IsFinite(v)).ToList();
        // Prechelt (1998): GL(t) = 100 · (E_va(t) / min over t' ≤ t of E_va(t') − 1); the stored value when the detector kept one.
        var computed = Statistics.GeneralisationLoss([.. withLoss.Select(e => e.ValidationLoss!.Value)]);
        var gl = withLoss.Select((e, i) => (e.Epoch, Value: e.Statistics is { } s && double.IsFinite(s.GeneralisationLoss) ? s.GeneralisationLoss : computed[i]))
            .ToDictionary(x => x.Epoch, x => x.Value);
        return
        [
            new EvidencePanel(
                "generalisation loss (Prechelt 1998)",
                "GL (%)",
                [
                    new("GL: validation loss above its best so far", e => gl.TryGetValue(e.Epoch, out double v) ? v : null, EvidenceRole.Statistic),
                    new($"threshold α = {Number(p.GeneralisationLossThreshold)}%", e => gl.ContainsKey(e.Epoch) ? p.GeneralisationLossThreshold : null, EvidenceRole.Bound),
                ],
                null,
                "fires: GL above α (Halt or Caution as the policy lists it)"),
            LossPanel(),
        ];
    }

    private static IReadOnlyList<EvidencePanel> Health(EvidenceInput input) => [LossPanel()];

    private static EvidencePanel LossPanel() => new(
        "losses",
        "loss",
        [
            new("validation loss", e => e.ValidationLoss, EvidenceRole.HeldOut),
            new("training loss", e => e.TrainLoss, EvidenceRole.Training),
        ],
        null,
        "a break in a line: a value that is not a finite number");

    private static EvidencePanel Unavailable(string title, string why) => new(title, "", [], null, why);

    private static string Patience(GatePolicy policy) =>
        policy.Patience == 1 ? "an epoch" : $"{policy.Patience.ToString(CultureInfo.InvariantCulture)} epochs running";

    private static bool HasAlignment(RunHistory history, int f) =>
        f >= 0 && history.Epochs.Any(e => e.HeldOutAlignment.Length > f && e.TrainingAlignment.Length > f);

    /// <summary>
    /// The memorised-identifier rule's CUSUM of the alignment gap, recomputed from the stored statistics as the rule does:
    /// z = gap / max(W / 3.29, 1e-9), S = max(0, S + z − K), over the epochs the rule reads (trusted, from the warm-up on).
    /// </summary>
    internal static Dictionary<int, double> Cusum(RunHistory history, int f, GatePolicy policy)
    {
        var sums = new Dictionary<int, double>();
        double sum = 0;
        foreach (var epoch in history.Epochs)
        {
            if (epoch.Epoch < policy.WarmupEpochs || epoch.Statistics is not { Trusted: true } s || s.AlignmentGap.Length <= f || s.AlignmentGapWidth.Length <= f)
                continue;
            double z = s.AlignmentGap[f] / Math.Max(s.AlignmentGapWidth[f] / 3.29, 1e-9);
            sum = Math.Max(0, sum + z - policy.IdentifierCusumAllowance);
            sums[epoch.Epoch] = sum;
        }
        return sums;
    }

    /// <summary>
    /// Per epoch with per-row scores of the feature: the share of held-out and of training rows whose attribution's sign
    /// agrees with the label, and the one-sided 95% Wilson lower bound of the pooled share, as the probable-leak rule reads it.
    /// </summary>
    internal static Dictionary<int, (double HeldOut, double Training, double Lower)> Agreement(RunHistory history, int f)
    {
        var result = new Dictionary<int, (double, double, double)>();
        var signs = history.AlignmentSigns;
        var rows = history.Rows.FirstOrDefault(r => r.FeatureIndex == f);
        if (signs is null || rows is null || signs.Length != history.HeldOutRows + history.TrainingRows)
            return result;
        foreach (var epoch in rows.Epochs)
        {
            if (epoch.HeldOut.Length != history.HeldOutRows || epoch.Training.Length != history.TrainingRows || epoch.HeldOut.IsEmpty)
                continue;
            int heldOut = Enumerable.Range(0, epoch.HeldOut.Length).Count(r => epoch.HeldOut[r] * signs[r] > 0);
            int training = Enumerable.Range(0, epoch.Training.Length).Count(r => epoch.Training[r] * signs[history.HeldOutRows + r] > 0);
            int all = epoch.HeldOut.Length + epoch.Training.Length;
            result[epoch.Epoch] = (
                (double)heldOut / epoch.HeldOut.Length,
                epoch.Training.IsEmpty ? double.NaN : (double)training / epoch.Training.Length,
                Statistics.WilsonLowerBound(heldOut + training, all, 1.645));
        }
        return result;
    }
}
