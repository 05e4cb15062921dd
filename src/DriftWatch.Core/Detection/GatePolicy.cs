using System.Collections.Frozen;
using System.Collections.Immutable;
using System.Text.Json;
using DriftWatch.Options;

namespace DriftWatch.Detection;

/// <summary>The gate's thresholds, warm-up and patience; read from a small JSON file or taken as built in.</summary>
/// <remarks>
/// Widths are multiples of a statistic's noise floor W, the 90% width of its row bootstrap. Defaults come from
/// prototype measurements on invented greenhouse-like data (see docs/evaluation.md) and are starting
/// points, not universal constants. Every setting is declared once, in <see cref="Settings"/> (key, values accepted,
/// meaning) and by its property (type and default); a value out of range is refused when it is set, by <c>new</c>,
/// <c>with</c> or <see cref="Parse"/> alike, with the message a policy file gets.
/// </remarks>
public sealed record GatePolicy
{
    /// <summary>Every setting, in the order <see cref="ToJson"/> writes them: key, values accepted and meaning, for reading, writing and help.</summary>
    public static ImmutableArray<PolicySetting> Settings { get; } =
    [
        PolicySetting.Integer(nameof(WarmupEpochs), "warmupEpochs", IntegerRange.AtLeast(0), p => p.WarmupEpochs, (p, v) => p with { WarmupEpochs = v },
            "Epochs at the start whose attribution findings are ignored, counted from the run's first epoch (1 ignores epoch 1 of a run numbered from 1)."),
        PolicySetting.Integer(nameof(Patience), "patience", IntegerRange.AtLeast(1), p => p.Patience, (p, v) => p with { Patience = v },
            "Consecutive flagged epochs before an attribution rule becomes a finding."),
        PolicySetting.Number(nameof(GeneralisationLossThreshold), "generalisationLossThreshold", NumberRange.Above(0) with { Text = "number > 0 (percent)" },
            p => p.GeneralisationLossThreshold, (p, v) => p with { GeneralisationLossThreshold = v },
            "Prechelt's GL threshold α, in percent: overfitting when GL(t) > α."),
        PolicySetting.Number(nameof(LeakWidths), "leakWidths", NumberRange.Above(0), p => p.LeakWidths, (p, v) => p with { LeakWidths = v },
            "Leak without a split-consistency check (older stores, probes built from their halves): training-minus-held-out share gap beyond this many widths W."),
        PolicySetting.Number(nameof(LeakMinimumGap), "leakMinimumGap", NumberRange.Interval(0, true, 1, true), p => p.LeakMinimumGap, (p, v) => p with { LeakMinimumGap = v },
            "Leak without a split-consistency check: the share gap must also exceed this absolute amount."),
        PolicySetting.Number(nameof(LeakAlignmentWidths), "leakAlignmentWidths", NumberRange.Above(0), p => p.LeakAlignmentWidths, (p, v) => p with { LeakAlignmentWidths = v },
            "Leak without a split-consistency check: label-alignment gap (training minus held-out) of a feature that is not identifier-like beyond this many widths W."),
        PolicySetting.Number(nameof(LeakMinimumAlignmentGap), "leakMinimumAlignmentGap", NumberRange.Interval(0, true, 2, true), p => p.LeakMinimumAlignmentGap,
            (p, v) => p with { LeakMinimumAlignmentGap = v }, "Leak without a split-consistency check: the alignment gap must also exceed this absolute amount."),
        PolicySetting.Number(nameof(LeakMinimumShare), "leakMinimumShare", NumberRange.Interval(0, true, 1, true), p => p.LeakMinimumShare, (p, v) => p with { LeakMinimumShare = v },
            "Leak by alignment without a split-consistency check: the feature's share of training-half attribution must be at least this (the model leans on it)."),
        PolicySetting.Integer(nameof(HalfExchangeResplits), "halfExchangeResplits", IntegerRange.Between(100, 100000), p => p.HalfExchangeResplits,
            (p, v) => p with { HalfExchangeResplits = v },
            "Reliance (leak, overfitted feature): re-splits of the probe rows between the halves, drawn once per run from seed, giving the null of each feature's share and alignment gaps."),
        PolicySetting.Number(nameof(RelianceFalseDiscoveryRate), "relianceFalseDiscoveryRate", NumberRange.Interval(0, false, 1, false), p => p.RelianceFalseDiscoveryRate,
            (p, v) => p with { RelianceFalseDiscoveryRate = v },
            "Reliance: Benjamini–Hochberg false discovery rate across features, for the share gap and the alignment gap, each epoch."),
        PolicySetting.Number(nameof(RelianceMinimumShare), "relianceMinimumShare", NumberRange.Interval(0, true, 1, true), p => p.RelianceMinimumShare,
            (p, v) => p with { RelianceMinimumShare = v },
            "Reliance, optional: a feature must also take at least this share of training-half attribution (0: no minimum; the null alone decides)."),
        PolicySetting.Number(nameof(RelianceMinimumAlignmentGap), "relianceMinimumAlignmentGap", NumberRange.Interval(0, true, 2, true), p => p.RelianceMinimumAlignmentGap,
            (p, v) => p with { RelianceMinimumAlignmentGap = v },
            "Reliance by alignment, optional: the alignment gap must also be at least this (0: no minimum; the null alone decides)."),
        PolicySetting.Number(nameof(SplitCheckFalseDiscoveryRate), "splitCheckFalseDiscoveryRate", NumberRange.Interval(0, false, 1, false), p => p.SplitCheckFalseDiscoveryRate,
            (p, v) => p with { SplitCheckFalseDiscoveryRate = v },
            "Split-consistency check: Benjamini–Hochberg false discovery rate across raw inputs."),
        PolicySetting.Number(nameof(SplitCheckMinimumGap), "splitCheckMinimumGap", NumberRange.Interval(0, true, 1, false), p => p.SplitCheckMinimumGap,
            (p, v) => p with { SplitCheckMinimumGap = v },
            "Split-consistency check: an input fails only when its AUC gap (training minus held-out, the input alone predicting the label) is also at least this."),
        PolicySetting.Number(nameof(IdentifierWidths), "identifierWidths", NumberRange.Above(0), p => p.IdentifierWidths, (p, v) => p with { IdentifierWidths = v },
            "Memorised identifier: label-alignment gap beyond this many widths W."),
        PolicySetting.Number(nameof(IdentifierCusumAllowance), "identifierCusumAllowance", NumberRange.AtLeast(0), p => p.IdentifierCusumAllowance,
            (p, v) => p with { IdentifierCusumAllowance = v }, "Memorised identifier, accumulated: CUSUM allowance K on the alignment gap, in its standard errors."),
        PolicySetting.Number(nameof(IdentifierCusumThreshold), "identifierCusumThreshold", NumberRange.Above(0), p => p.IdentifierCusumThreshold,
            (p, v) => p with { IdentifierCusumThreshold = v }, "Memorised identifier, accumulated: CUSUM decision interval H on the alignment gap, in its standard errors."),
        PolicySetting.Number(nameof(IdentifierRareFraction), "identifierRareFraction", NumberRange.Interval(0, false, 1, true), p => p.IdentifierRareFraction,
            (p, v) => p with { IdentifierRareFraction = v },
            "A categorical is identifier-like when at least this fraction of training rows carry a value seen in at most 3 training rows."),
        PolicySetting.Number(nameof(DominanceWidths), "dominanceWidths", NumberRange.Above(0), p => p.DominanceWidths, (p, v) => p with { DominanceWidths = v },
            "Dominant feature: top-1 minus top-2 share beyond this many widths W on both halves."),
        PolicySetting.Number(nameof(PurityLowerBound), "purityLowerBound", NumberRange.Interval(0, false, 1, true), p => p.PurityLowerBound, (p, v) => p with { PurityLowerBound = v },
            "Probable leak: the one-sided 95% Wilson lower bound of how often the dominant categorical's attribution points at the true label, over the probe "
            + "rows of both halves, must be at least this, and so must the plain share on held-out rows."),
        PolicySetting.Number(nameof(DeltaTolerance), "deltaTolerance", NumberRange.Interval(0, false, 1, true), p => p.DeltaTolerance, (p, v) => p with { DeltaTolerance = v },
            "Mean convergence delta, as a fraction of mean |F(x) − F(x′)|, beyond which an epoch's path maps are not trusted."),
        PolicySetting.Integer(nameof(BootstrapResamples), "bootstrapResamples", IntegerRange.Between(20, 10000), p => p.BootstrapResamples, (p, v) => p with { BootstrapResamples = v },
            "Bootstrap resamples for noise floors."),
        PolicySetting.Integer(nameof(Seed), "seed", IntegerRange.Any, p => p.Seed, (p, v) => p with { Seed = v }, "Seed of the bootstrap."),
        PolicySetting.Number(nameof(CusumAllowance), "cusumAllowance", NumberRange.AtLeast(0), p => p.CusumAllowance, (p, v) => p with { CusumAllowance = v },
            "CUSUM allowance K in standard errors of a share."),
        PolicySetting.Number(nameof(CusumThreshold), "cusumThreshold", NumberRange.Above(0), p => p.CusumThreshold, (p, v) => p with { CusumThreshold = v },
            "CUSUM decision interval H in standard errors of a share."),
        PolicySetting.Kinds(nameof(HaltOn), "haltOn", p => p.HaltOn, (p, v) => p with { HaltOn = v }, "Finding kinds that may raise a Halt; the others raise Caution."),
        PolicySetting.Switch(nameof(SingleMethodMayHalt), "singleMethodMayHalt", p => p.SingleMethodMayHalt, (p, v) => p with { SingleMethodMayHalt = v },
            "Whether a finding that only other methods than the first configured one show may raise a Halt (by its kind, as haltOn says); when false such a "
            + "finding asks for Caution at most, since one method's swing can be that method's artefact."),
    ];

    private static readonly FrozenDictionary<string, PolicySetting> ByKey = Settings.ToFrozenDictionary(s => s.Key, StringComparer.Ordinal);

    private static readonly FrozenDictionary<string, PolicySetting> ByProperty = Settings.ToFrozenDictionary(s => s.Property, StringComparer.Ordinal);

    private static readonly JsonSerializerOptions Indented = new() { WriteIndented = true };

    /// <summary>The <c>warmupEpochs</c> setting (see <see cref="Settings"/>). Default 1.</summary>
    public int WarmupEpochs { get; init => field = Check(value, nameof(WarmupEpochs)); } = 1;

    /// <summary>The <c>patience</c> setting (see <see cref="Settings"/>). Default 2.</summary>
    public int Patience { get; init => field = Check(value, nameof(Patience)); } = 2;

    /// <summary>The <c>generalisationLossThreshold</c> setting (see <see cref="Settings"/>). Default 5.</summary>
    public double GeneralisationLossThreshold { get; init => field = Check(value, nameof(GeneralisationLossThreshold)); } = 5;

    /// <summary>The <c>leakWidths</c> setting (see <see cref="Settings"/>). Default 1.5.</summary>
    public double LeakWidths { get; init => field = Check(value, nameof(LeakWidths)); } = 1.5;

    /// <summary>The <c>leakMinimumGap</c> setting (see <see cref="Settings"/>). Default 0.04.</summary>
    public double LeakMinimumGap { get; init => field = Check(value, nameof(LeakMinimumGap)); } = 0.04;

    /// <summary>The <c>leakAlignmentWidths</c> setting (see <see cref="Settings"/>). Default 1.4.</summary>
    public double LeakAlignmentWidths { get; init => field = Check(value, nameof(LeakAlignmentWidths)); } = 1.4;

    /// <summary>The <c>leakMinimumAlignmentGap</c> setting (see <see cref="Settings"/>). Default 0.6.</summary>
    public double LeakMinimumAlignmentGap { get; init => field = Check(value, nameof(LeakMinimumAlignmentGap)); } = 0.6;

    /// <summary>The <c>leakMinimumShare</c> setting (see <see cref="Settings"/>). Default 0.1.</summary>
    public double LeakMinimumShare { get; init => field = Check(value, nameof(LeakMinimumShare)); } = 0.1;

    /// <summary>The <c>halfExchangeResplits</c> setting (see <see cref="Settings"/>). Default 2000.</summary>
    public int HalfExchangeResplits { get; init => field = Check(value, nameof(HalfExchangeResplits)); } = 2000;

    /// <summary>The <c>relianceFalseDiscoveryRate</c> setting (see <see cref="Settings"/>). Default 0.05.</summary>
    public double RelianceFalseDiscoveryRate { get; init => field = Check(value, nameof(RelianceFalseDiscoveryRate)); } = 0.05;

    /// <summary>The <c>relianceMinimumShare</c> setting (see <see cref="Settings"/>). Default 0 (no minimum).</summary>
    public double RelianceMinimumShare { get; init => field = Check(value, nameof(RelianceMinimumShare)); }

    /// <summary>The <c>relianceMinimumAlignmentGap</c> setting (see <see cref="Settings"/>). Default 0 (no minimum).</summary>
    public double RelianceMinimumAlignmentGap { get; init => field = Check(value, nameof(RelianceMinimumAlignmentGap)); }

    /// <summary>The <c>splitCheckFalseDiscoveryRate</c> setting (see <see cref="Settings"/>). Default 0.05.</summary>
    public double SplitCheckFalseDiscoveryRate { get; init => field = Check(value, nameof(SplitCheckFalseDiscoveryRate)); } = 0.05;

    /// <summary>The <c>splitCheckMinimumGap</c> setting (see <see cref="Settings"/>). Default 0.02.</summary>
    public double SplitCheckMinimumGap { get; init => field = Check(value, nameof(SplitCheckMinimumGap)); } = 0.02;

    /// <summary>The <c>identifierWidths</c> setting (see <see cref="Settings"/>). Default 0.75.</summary>
    public double IdentifierWidths { get; init => field = Check(value, nameof(IdentifierWidths)); } = 0.75;

    /// <summary>The <c>identifierCusumAllowance</c> setting (see <see cref="Settings"/>). Default 0.5.</summary>
    public double IdentifierCusumAllowance { get; init => field = Check(value, nameof(IdentifierCusumAllowance)); } = 0.5;

    /// <summary>The <c>identifierCusumThreshold</c> setting (see <see cref="Settings"/>). Default 5.</summary>
    public double IdentifierCusumThreshold { get; init => field = Check(value, nameof(IdentifierCusumThreshold)); } = 5;

    /// <summary>The <c>identifierRareFraction</c> setting (see <see cref="Settings"/>). Default 0.5.</summary>
    public double IdentifierRareFraction { get; init => field = Check(value, nameof(IdentifierRareFraction)); } = 0.5;

    /// <summary>The <c>dominanceWidths</c> setting (see <see cref="Settings"/>). Default 2.5.</summary>
    public double DominanceWidths { get; init => field = Check(value, nameof(DominanceWidths)); } = 2.5;

    /// <summary>The <c>purityLowerBound</c> setting (see <see cref="Settings"/>). Default 0.77.</summary>
    public double PurityLowerBound { get; init => field = Check(value, nameof(PurityLowerBound)); } = 0.77;

    /// <summary>The <c>deltaTolerance</c> setting (see <see cref="Settings"/>). Default 0.05.</summary>
    public double DeltaTolerance { get; init => field = Check(value, nameof(DeltaTolerance)); } = 0.05;

    /// <summary>The <c>bootstrapResamples</c> setting (see <see cref="Settings"/>). Default 200.</summary>
    public int BootstrapResamples { get; init => field = Check(value, nameof(BootstrapResamples)); } = 200;

    /// <summary>The <c>seed</c> setting (see <see cref="Settings"/>). Default 12345.</summary>
    public int Seed { get; init => field = Check(value, nameof(Seed)); } = 12345;

    /// <summary>The <c>cusumAllowance</c> setting (see <see cref="Settings"/>). Default 0.5.</summary>
    public double CusumAllowance { get; init => field = Check(value, nameof(CusumAllowance)); } = 0.5;

    /// <summary>The <c>cusumThreshold</c> setting (see <see cref="Settings"/>). Default 5.</summary>
    public double CusumThreshold { get; init => field = Check(value, nameof(CusumThreshold)); } = 5;

    /// <summary>The <c>haltOn</c> setting (see <see cref="Settings"/>). Default: leak, memorised identifier, probable leak, overfitting.</summary>
    public ImmutableArray<FindingKind> HaltOn { get; init => field = ByProperty[nameof(HaltOn)].Check(value); } =
        [FindingKind.Leak, FindingKind.MemorisedIdentifier, FindingKind.ProbableLeak, FindingKind.Overfitting];

    /// <summary>The <c>singleMethodMayHalt</c> setting (see <see cref="Settings"/>). Default false.</summary>
    public bool SingleMethodMayHalt { get; init; }

    /// <summary>The built-in policy.</summary>
    public static GatePolicy Default { get; } = new();

    /// <summary>Whether two policies hold the same settings (<see cref="HaltOn"/> compared kind by kind, in order).</summary>
    public bool Equals(GatePolicy? other) => other is not null && string.Equals(ToJson(), other.ToJson(), StringComparison.Ordinal);

    /// <inheritdoc/>
    public override int GetHashCode() => StringComparer.Ordinal.GetHashCode(ToJson());

    /// <summary>Whether a finding of this kind may raise a Halt.</summary>
    public VerdictKind SeverityOf(FindingKind kind) => HaltOn.Contains(kind) ? VerdictKind.Halt : VerdictKind.Caution;

    /// <summary>The severity of a finding of this kind that only methods other than the first configured one show.</summary>
    public VerdictKind SeverityOfSingleMethod(FindingKind kind) => SingleMethodMayHalt ? SeverityOf(kind) : VerdictKind.Caution;

    /// <summary>Reads a policy file; keys left out keep their defaults.</summary>
    /// <exception cref="DriftWatchException">Missing file, bad JSON, unknown keys or values out of range; the message names every one.</exception>
    public static GatePolicy Load(string path)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        if (!File.Exists(path))
            throw new DriftWatchException($"policy file '{path}' does not exist; write one (see README, The gate) or leave --policy out for the built-in policy");
        return Parse(File.ReadAllText(path), path);
    }

    /// <summary>Parses policy JSON; <paramref name="source"/> names it in errors.</summary>
    /// <exception cref="DriftWatchException">Bad JSON, or unknown keys and values out of range: one line naming every problem.</exception>
    public static GatePolicy Parse(string json, string source = "policy")
    {
        ArgumentNullException.ThrowIfNull(json);
        JsonDocument document;
        try
        {
            document = JsonDocument.Parse(json, new JsonDocumentOptions { CommentHandling = JsonCommentHandling.Skip, AllowTrailingCommas = true });
        }
        catch (JsonException e)
        {
            throw new DriftWatchException($"{source}: not valid JSON ({e.Message})");
        }
        using (document)
        {
            if (document.RootElement.ValueKind != JsonValueKind.Object)
                throw new DriftWatchException($"{source}: expected a JSON object of settings, e.g. {{\"patience\": 2}}");
            var policy = Default;
            var found = new List<string>();
            var unknown = new List<string>();
            int unknownAt = 0;
            foreach (var property in document.RootElement.EnumerateObject())
            {
                if (!ByKey.TryGetValue(property.Name, out var setting))
                {
                    if (unknown.Count == 0)
                        unknownAt = found.Count;
                    unknown.Add(property.Name);
                }
                else if (setting.Read(policy, property.Value) is { } read)
                {
                    policy = read;
                }
                else
                {
                    found.Add(setting.Problem(property.Value.GetRawText()));
                }
            }
            // The unknown keys are one problem, where the first of them stood, listing the allowed keys once.
            if (unknown.Count > 0)
                found.Insert(unknownAt, $"unknown key{(unknown.Count == 1 ? "" : "s")} {string.Join(", ", unknown.Select(k => $"'{k}'"))}; allowed keys: {string.Join(", ", ByKey.Keys.Order(StringComparer.Ordinal))}");
            var problems = new Problems();
            found.ForEach(problems.Add);
            problems.ThrowIfAny(source);
            return policy;
        }
    }

    /// <summary>The policy as JSON, every key written.</summary>
    public string ToJson() => JsonSerializer.Serialize(Settings.ToDictionary(s => s.Key, s => s.Value(this)), Indented);

    private static int Check(int value, string property) => ByProperty[property].Check(value);

    private static double Check(double value, string property) => ByProperty[property].Check(value);
}
