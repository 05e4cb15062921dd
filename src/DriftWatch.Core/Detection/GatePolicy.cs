using System.Collections.Immutable;
using System.Globalization;
using System.Text.Json;

namespace DriftWatch.Detection;

/// <summary>The gate's thresholds, warm-up and patience; read from a small JSON file or taken as built in.</summary>
/// <remarks>
/// Widths are multiples of a statistic's noise floor W, the 90% width of its row bootstrap. Defaults come from
/// prototype measurements on invented greenhouse-like data (see the README's evaluation section) and are starting
/// points, not universal constants.
/// </remarks>
public sealed record GatePolicy
{
    /// <summary>Epochs at the start whose attribution findings are ignored. Default 1.</summary>
    public int WarmupEpochs { get; init; } = 1;

    /// <summary>Consecutive flagged epochs before an attribution rule becomes a finding. Default 2.</summary>
    public int Patience { get; init; } = 2;

    /// <summary>Prechelt's GL threshold α, in percent: overfitting when GL(t) &gt; α. Default 5.</summary>
    public double GeneralisationLossThreshold { get; init; } = 5;

    /// <summary>Leak: training-minus-held-out share gap beyond this many widths W. Default 1.5.</summary>
    public double LeakWidths { get; init; } = 1.5;

    /// <summary>Leak: the share gap must also exceed this absolute amount. Default 0.04.</summary>
    public double LeakMinimumGap { get; init; } = 0.04;

    /// <summary>Leak: label-alignment gap (training minus held-out) of a feature that is not identifier-like beyond this many widths W. Default 1.4.</summary>
    public double LeakAlignmentWidths { get; init; } = 1.4;

    /// <summary>Leak: the alignment gap must also exceed this absolute amount. Default 0.6.</summary>
    public double LeakMinimumAlignmentGap { get; init; } = 0.6;

    /// <summary>Leak by alignment: the feature's share of training-half attribution must be at least this (the model leans on it). Default 0.1.</summary>
    public double LeakMinimumShare { get; init; } = 0.1;

    /// <summary>Memorised identifier: label-alignment gap beyond this many widths W. Default 0.75.</summary>
    public double IdentifierWidths { get; init; } = 0.75;

    /// <summary>Memorised identifier, accumulated: CUSUM allowance K on the alignment gap, in its standard errors. Default 0.5.</summary>
    public double IdentifierCusumAllowance { get; init; } = 0.5;

    /// <summary>Memorised identifier, accumulated: CUSUM decision interval H on the alignment gap, in its standard errors. Default 5.</summary>
    public double IdentifierCusumThreshold { get; init; } = 5;

    /// <summary>A categorical is identifier-like when at least this fraction of training rows carry a value seen in at most 3 training rows. Default 0.5.</summary>
    public double IdentifierRareFraction { get; init; } = 0.5;

    /// <summary>Dominant feature: top-1 minus top-2 share beyond this many widths W on both halves. Default 2.5.</summary>
    public double DominanceWidths { get; init; } = 2.5;

    /// <summary>
    /// Probable leak: the one-sided 95% Wilson lower bound of how often the dominant categorical's attribution points at the
    /// true label, over the probe rows of both halves, must be at least this, and so must the plain share on held-out rows.
    /// Default 0.77.
    /// </summary>
    public double PurityLowerBound { get; init; } = 0.77;

    /// <summary>Mean convergence delta, as a fraction of mean |F(x) − F(x′)|, beyond which an epoch's path maps are not trusted. Default 0.05.</summary>
    public double DeltaTolerance { get; init; } = 0.05;

    /// <summary>Bootstrap resamples for noise floors. Default 200.</summary>
    public int BootstrapResamples { get; init; } = 200;

    /// <summary>Seed of the bootstrap. Default 12345.</summary>
    public int Seed { get; init; } = 12345;

    /// <summary>CUSUM allowance K in standard errors of a share. Default 0.5.</summary>
    public double CusumAllowance { get; init; } = 0.5;

    /// <summary>CUSUM decision interval H in standard errors of a share. Default 5.</summary>
    public double CusumThreshold { get; init; } = 5;

    /// <summary>Finding kinds that may raise a Halt; the others raise Caution. Default: leak, memorised identifier, probable leak, overfitting.</summary>
    public ImmutableArray<FindingKind> HaltOn { get; init; } =
        [FindingKind.Leak, FindingKind.MemorisedIdentifier, FindingKind.ProbableLeak, FindingKind.Overfitting];

    /// <summary>
    /// Whether a finding that only other methods than the first configured one show may raise a Halt (by its kind, as
    /// <see cref="HaltOn"/> says). Default false: such a finding asks for Caution at most, since one method's swing can be
    /// that method's artefact.
    /// </summary>
    public bool SingleMethodMayHalt { get; init; }

    /// <summary>The built-in policy.</summary>
    public static GatePolicy Default { get; } = new();

    private static readonly ImmutableDictionary<string, string> Keys = new Dictionary<string, string>
    {
        ["warmupEpochs"] = "integer ≥ 0",
        ["patience"] = "integer ≥ 1",
        ["generalisationLossThreshold"] = "number > 0 (percent)",
        ["leakWidths"] = "number > 0",
        ["leakMinimumGap"] = "number in [0, 1]",
        ["leakAlignmentWidths"] = "number > 0",
        ["leakMinimumAlignmentGap"] = "number in [0, 2]",
        ["leakMinimumShare"] = "number in [0, 1]",
        ["identifierWidths"] = "number > 0",
        ["identifierCusumAllowance"] = "number ≥ 0",
        ["identifierCusumThreshold"] = "number > 0",
        ["identifierRareFraction"] = "number in (0, 1]",
        ["dominanceWidths"] = "number > 0",
        ["purityLowerBound"] = "number in (0, 1]",
        ["deltaTolerance"] = "number in (0, 1]",
        ["bootstrapResamples"] = "integer between 20 and 10000",
        ["seed"] = "integer",
        ["cusumAllowance"] = "number ≥ 0",
        ["cusumThreshold"] = "number > 0",
        ["haltOn"] = "array of " + string.Join(", ", FindingKinds.Names),
        ["singleMethodMayHalt"] = "true or false",
    }.ToImmutableDictionary();

    /// <summary>Whether a finding of this kind may raise a Halt.</summary>
    public VerdictKind SeverityOf(FindingKind kind) => HaltOn.Contains(kind) ? VerdictKind.Halt : VerdictKind.Caution;

    /// <summary>The severity of a finding of this kind that only methods other than the first configured one show.</summary>
    public VerdictKind SeverityOfSingleMethod(FindingKind kind) => SingleMethodMayHalt ? SeverityOf(kind) : VerdictKind.Caution;

    /// <summary>Reads a policy file; keys left out keep their defaults.</summary>
    /// <exception cref="DriftWatchException">Missing file, bad JSON, an unknown key or a value out of range; the message names it.</exception>
    public static GatePolicy Load(string path)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        if (!File.Exists(path))
            throw new DriftWatchException($"policy file '{path}' does not exist; write one (see README, The gate) or leave --policy out for the built-in policy");
        return Parse(File.ReadAllText(path), path);
    }

    /// <summary>Parses policy JSON; <paramref name="source"/> names it in errors.</summary>
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
            foreach (var property in document.RootElement.EnumerateObject())
                policy = Apply(policy, property, source);
            return policy;
        }
    }

    /// <summary>The policy as JSON, every key written.</summary>
    public string ToJson()
    {
        var values = new Dictionary<string, object>
        {
            ["warmupEpochs"] = WarmupEpochs,
            ["patience"] = Patience,
            ["generalisationLossThreshold"] = GeneralisationLossThreshold,
            ["leakWidths"] = LeakWidths,
            ["leakMinimumGap"] = LeakMinimumGap,
            ["leakAlignmentWidths"] = LeakAlignmentWidths,
            ["leakMinimumAlignmentGap"] = LeakMinimumAlignmentGap,
            ["leakMinimumShare"] = LeakMinimumShare,
            ["identifierWidths"] = IdentifierWidths,
            ["identifierCusumAllowance"] = IdentifierCusumAllowance,
            ["identifierCusumThreshold"] = IdentifierCusumThreshold,
            ["identifierRareFraction"] = IdentifierRareFraction,
            ["dominanceWidths"] = DominanceWidths,
            ["purityLowerBound"] = PurityLowerBound,
            ["deltaTolerance"] = DeltaTolerance,
            ["bootstrapResamples"] = BootstrapResamples,
            ["seed"] = Seed,
            ["cusumAllowance"] = CusumAllowance,
            ["cusumThreshold"] = CusumThreshold,
            ["haltOn"] = HaltOn.Select(FindingKinds.NameOf).ToArray(),
            ["singleMethodMayHalt"] = SingleMethodMayHalt,
        };
        return JsonSerializer.Serialize(values, new JsonSerializerOptions { WriteIndented = true });
    }

    private static GatePolicy Apply(GatePolicy p, JsonProperty property, string source)
    {
        string key = property.Name;
        if (!Keys.TryGetValue(key, out string? allowed))
            throw new DriftWatchException($"{source}: unknown key '{key}'; allowed keys: {string.Join(", ", Keys.Keys.Order(StringComparer.Ordinal))}");
        var value = property.Value;
        DriftWatchException Bad() => new($"{source}: '{key}' must be {allowed}; got {value.GetRawText()}");
        double Number(Func<double, bool> ok)
        {
            if (value.ValueKind != JsonValueKind.Number || !value.TryGetDouble(out double d) || !double.IsFinite(d) || !ok(d))
                throw Bad();
            return d;
        }
        int Integer(Func<int, bool> ok)
        {
            if (value.ValueKind != JsonValueKind.Number || !value.TryGetInt32(out int i) || !ok(i))
                throw Bad();
            return i;
        }
        return key switch
        {
            "warmupEpochs" => p with { WarmupEpochs = Integer(i => i >= 0) },
            "patience" => p with { Patience = Integer(i => i >= 1) },
            "generalisationLossThreshold" => p with { GeneralisationLossThreshold = Number(d => d > 0) },
            "leakWidths" => p with { LeakWidths = Number(d => d > 0) },
            "leakMinimumGap" => p with { LeakMinimumGap = Number(d => d is >= 0 and <= 1) },
            "leakAlignmentWidths" => p with { LeakAlignmentWidths = Number(d => d > 0) },
            "leakMinimumAlignmentGap" => p with { LeakMinimumAlignmentGap = Number(d => d is >= 0 and <= 2) },
            "leakMinimumShare" => p with { LeakMinimumShare = Number(d => d is >= 0 and <= 1) },
            "identifierWidths" => p with { IdentifierWidths = Number(d => d > 0) },
            "identifierCusumAllowance" => p with { IdentifierCusumAllowance = Number(d => d >= 0) },
            "identifierCusumThreshold" => p with { IdentifierCusumThreshold = Number(d => d > 0) },
            "identifierRareFraction" => p with { IdentifierRareFraction = Number(d => d is > 0 and <= 1) },
            "dominanceWidths" => p with { DominanceWidths = Number(d => d > 0) },
            "purityLowerBound" => p with { PurityLowerBound = Number(d => d is > 0 and <= 1) },
            "deltaTolerance" => p with { DeltaTolerance = Number(d => d is > 0 and <= 1) },
            "bootstrapResamples" => p with { BootstrapResamples = Integer(i => i is >= 20 and <= 10000) },
            "seed" => p with { Seed = Integer(_ => true) },
            "cusumAllowance" => p with { CusumAllowance = Number(d => d >= 0) },
            "cusumThreshold" => p with { CusumThreshold = Number(d => d > 0) },
            "haltOn" => p with { HaltOn = Kinds(value, Bad) },
            "singleMethodMayHalt" => p with { SingleMethodMayHalt = value.ValueKind is JsonValueKind.True or JsonValueKind.False ? value.GetBoolean() : throw Bad() },
            _ => throw Bad(),
        };
    }

    private static ImmutableArray<FindingKind> Kinds(JsonElement value, Func<DriftWatchException> bad)
    {
        if (value.ValueKind != JsonValueKind.Array)
            throw bad();
        var kinds = ImmutableArray.CreateBuilder<FindingKind>();
        foreach (var item in value.EnumerateArray())
        {
            if (item.ValueKind != JsonValueKind.String || !FindingKinds.TryParse(item.GetString(), out FindingKind kind))
                throw bad();
            kinds.Add(kind);
        }
        return kinds.ToImmutable();
    }
}
