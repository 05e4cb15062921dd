using System.Collections.Immutable;
using System.Globalization;
using System.Reflection;
using DriftWatch.Detection;
using Xunit;

namespace DriftWatch.Tests.Detection;

public sealed class GatePolicyTests
{
    // The built-in policy as ToJson wrote it before the settings moved into one table; the bytes must not change.
    private const string DefaultJson = """
        {
          "warmupEpochs": 1,
          "patience": 2,
          "generalisationLossThreshold": 5,
          "leakWidths": 1.5,
          "leakMinimumGap": 0.04,
          "leakAlignmentWidths": 1.4,
          "leakMinimumAlignmentGap": 0.6,
          "leakMinimumShare": 0.1,
          "halfExchangeResplits": 2000,
          "relianceFalseDiscoveryRate": 0.05,
          "relianceMinimumShare": 0,
          "relianceMinimumAlignmentGap": 0,
          "splitCheckFalseDiscoveryRate": 0.05,
          "splitCheckMinimumGap": 0.02,
          "identifierWidths": 0.75,
          "identifierCusumAllowance": 0.5,
          "identifierCusumThreshold": 5,
          "identifierRareFraction": 0.5,
          "dominanceWidths": 2.5,
          "purityLowerBound": 0.77,
          "deltaTolerance": 0.05,
          "bootstrapResamples": 200,
          "seed": 12345,
          "cusumAllowance": 0.5,
          "cusumThreshold": 5,
          "haltOn": [
            "Leak",
            "MemorisedIdentifier",
            "ProbableLeak",
            "Overfitting"
          ],
          "singleMethodMayHalt": false
        }
        """;

    public static TheoryData<string> Keys => new(GatePolicy.Settings.Select(s => s.Key));

    [Fact]
    public void KeysLeftOutKeepTheirDefaults()
    {
        var policy = GatePolicy.Parse("""{ "patience": 3, "haltOn": ["Leak"] }""");

        Assert.Equal(3, policy.Patience);
        Assert.Equal(new[] { FindingKind.Leak }, policy.HaltOn.ToArray());
        Assert.Equal(GatePolicy.Default.LeakWidths, policy.LeakWidths);
    }

    [Fact]
    public void TheWrittenPolicyReadsBackEqual()
    {
        var policy = GatePolicy.Default with { Patience = 4, LeakWidths = 1.5, HaltOn = [FindingKind.ProbableLeak], SingleMethodMayHalt = true };

        var back = GatePolicy.Parse(policy.ToJson());

        Assert.Equal(policy.ToJson(), back.ToJson());
        Assert.True(back.SingleMethodMayHalt);
        Assert.Equal(VerdictKind.Halt, back.SeverityOfSingleMethod(FindingKind.ProbableLeak));
        Assert.Equal(VerdictKind.Caution, GatePolicy.Default.SeverityOfSingleMethod(FindingKind.Leak));
    }

    [Theory]
    [InlineData("""{ "patiense": 2 }""", "unknown key 'patiense'")]
    [InlineData("""{ "patience": 0 }""", "'patience' must be integer ≥ 1; got 0")]
    [InlineData("""{ "leakWidths": "wide" }""", "'leakWidths' must be number > 0; got \"wide\"")]
    [InlineData("""{ "haltOn": ["Leak", "Panic"] }""", "'haltOn' must be array of")]
    [InlineData("""{ "singleMethodMayHalt": 1 }""", "'singleMethodMayHalt' must be true or false; got 1")]
    [InlineData("""[1, 2]""", "expected a JSON object")]
    [InlineData("""{ "patience": 2""", "not valid JSON")]
    public void BadPoliciesNameTheKeyAndTheAllowedValues(string json, string expected)
    {
        var e = Assert.Throws<DriftWatchException>(() => GatePolicy.Parse(json, "night.json"));

        Assert.Contains(expected, e.Message);
        Assert.StartsWith("night.json: ", e.Message);
        Assert.DoesNotContain('\n', e.Message);
    }

    [Fact]
    public void OneBadValueGivesExactlyTheMessageItAlwaysGave()
    {
        Assert.Equal("night.json: 'patience' must be integer ≥ 1; got 0",
            Assert.Throws<DriftWatchException>(() => GatePolicy.Parse("""{ "patience": 0 }""", "night.json")).Message);
        Assert.Equal("night.json: 'bootstrapResamples' must be integer between 20 and 10000; got 10001",
            Assert.Throws<DriftWatchException>(() => GatePolicy.Parse("""{ "bootstrapResamples": 10001 }""", "night.json")).Message);
        Assert.Equal("night.json: unknown key 'patiense'; allowed keys: " + string.Join(", ", GatePolicy.Settings.Select(s => s.Key).Order(StringComparer.Ordinal)),
            Assert.Throws<DriftWatchException>(() => GatePolicy.Parse("""{ "patiense": 2 }""", "night.json")).Message);
    }

    [Fact]
    public void APolicyFileWithSeveralProblemsNamesEveryOneOnOneLine()
    {
        const string json = """{ "patience": 0, "warmup": 1, "leakWidths": -1, "haltOn": ["Panic"], "bogus": true, "seed": 1.5, "deltaTolerance": 0.1 }""";

        var e = Assert.Throws<DriftWatchException>(() => GatePolicy.Parse(json, "night.json"));

        Assert.StartsWith("night.json: 5 problems: 'patience' must be integer ≥ 1; got 0; unknown keys 'warmup', 'bogus'; allowed keys: ", e.Message);
        Assert.Contains("; 'leakWidths' must be number > 0; got -1; 'haltOn' must be array of ", e.Message);
        Assert.EndsWith("; got [\"Panic\"]; 'seed' must be integer; got 1.5", e.Message);
        Assert.DoesNotContain("deltaTolerance'", e.Message);
        Assert.DoesNotContain('\n', e.Message);
    }

    [Fact]
    public void TheBuiltInPolicyIsWrittenAsItAlwaysWasAndReadsBackEqual()
    {
        Assert.Equal(DefaultJson.ReplaceLineEndings(Environment.NewLine), GatePolicy.Default.ToJson());

        var back = GatePolicy.Parse(GatePolicy.Default.ToJson());

        Assert.Equal(GatePolicy.Default.ToJson(), back.ToJson());
        Assert.Equal(GatePolicy.Default with { HaltOn = back.HaltOn }, back);
        Assert.Equal(GatePolicy.Default.HaltOn.ToArray(), back.HaltOn.ToArray());
    }

    [Fact]
    public void APolicyWithEverySettingChangedReadsBackEqual()
    {
        var changed = new GatePolicy
        {
            WarmupEpochs = 3,
            Patience = 4,
            GeneralisationLossThreshold = 7.5,
            LeakWidths = 2.25,
            LeakMinimumGap = 0.125,
            LeakAlignmentWidths = 1.75,
            LeakMinimumAlignmentGap = 0.5,
            LeakMinimumShare = 0.2,
            HalfExchangeResplits = 4000,
            RelianceFalseDiscoveryRate = 0.1,
            RelianceMinimumShare = 0.05,
            RelianceMinimumAlignmentGap = 0.25,
            SplitCheckFalseDiscoveryRate = 0.01,
            SplitCheckMinimumGap = 0.05,
            IdentifierWidths = 1.25,
            IdentifierCusumAllowance = 0.25,
            IdentifierCusumThreshold = 6,
            IdentifierRareFraction = 0.375,
            DominanceWidths = 3,
            PurityLowerBound = 0.9,
            DeltaTolerance = 0.1,
            BootstrapResamples = 500,
            Seed = -7,
            CusumAllowance = 0.75,
            CusumThreshold = 4,
            HaltOn = [FindingKind.DominantFeature, FindingKind.NumericalTrouble],
            SingleMethodMayHalt = true,
        };
        // A setting added to the table but not to this policy fails here.
        Assert.All(GatePolicy.Settings, s => Assert.NotEqual(s.DefaultText, s.Text(changed)));

        var back = GatePolicy.Parse(changed.ToJson());

        Assert.Equal(changed.ToJson(), back.ToJson());
        Assert.All(GatePolicy.Settings, s => Assert.Equal(s.Text(changed), s.Text(back)));
        Assert.Equal(changed.HaltOn.ToArray(), back.HaltOn.ToArray());
    }

    [Fact]
    public void EveryPropertyIsOneSettingOfTheTableAndEverySettingIsWrittenAndListed()
    {
        var properties = typeof(GatePolicy).GetProperties(BindingFlags.Public | BindingFlags.Instance).Select(p => p.Name).Order(StringComparer.Ordinal);
        var keys = GatePolicy.Settings.Select(s => s.Key).ToList();

        Assert.Equal(properties, GatePolicy.Settings.Select(s => s.Property).Order(StringComparer.Ordinal));
        Assert.Equal(keys.Count, keys.Distinct(StringComparer.Ordinal).Count());
        using var written = System.Text.Json.JsonDocument.Parse(GatePolicy.Default.ToJson());
        Assert.Equal(keys, written.RootElement.EnumerateObject().Select(p => p.Name));
        foreach (var setting in GatePolicy.Settings)
        {
            Assert.False(string.IsNullOrWhiteSpace(setting.Meaning), setting.Key);
            Assert.False(string.IsNullOrWhiteSpace(setting.Allowed), setting.Key);
            Assert.Equal(written.RootElement.GetProperty(setting.Key).GetRawText().ReplaceLineEndings("").Replace("  ", "", StringComparison.Ordinal).Replace(",", ", ", StringComparison.Ordinal), setting.DefaultText);
        }
        Assert.Equal("2", GatePolicy.Settings.Single(s => s.Key == "patience").DefaultText);
        Assert.Equal("integer ≥ 1", GatePolicy.Settings.Single(s => s.Key == "patience").Allowed);
    }

    [Theory]
    [MemberData(nameof(Keys))]
    public void EverySettingRefusesValuesOutsideItsRangeInAFileAndWhenSet(string key)
    {
        var setting = GatePolicy.Settings.Single(s => s.Key == key);
        var property = typeof(GatePolicy).GetProperty(setting.Property)!;
        var bad = BadValues(setting).ToList();
        Assert.NotEmpty(bad);

        foreach (var (json, value) in bad)
        {
            var fromFile = Assert.Throws<DriftWatchException>(() => GatePolicy.Parse($$"""{ "{{key}}": {{json}} }""", "p.json"));
            Assert.Equal($"p.json: '{key}' must be {setting.Allowed}; got {json}", fromFile.Message);
            if (value is null)
                continue;
            // The same value set on a policy in code throws at once with the file's message.
            var fromCode = Assert.Throws<TargetInvocationException>(() => property.SetValue(new GatePolicy(), value));
            Assert.Equal(fromFile.Message["p.json: ".Length..], Assert.IsType<DriftWatchException>(fromCode.InnerException).Message);
        }
    }

    [Fact]
    public void AnInitializerOrWithThatBreaksARangeThrowsAtOnceWithTheFileMessage()
    {
        Assert.Equal("'patience' must be integer ≥ 1; got 0", Assert.Throws<DriftWatchException>(() => new GatePolicy { Patience = 0 }).Message);
        Assert.Equal("'bootstrapResamples' must be integer between 20 and 10000; got 0",
            Assert.Throws<DriftWatchException>(() => new GatePolicy { BootstrapResamples = 0, Patience = 0, LeakWidths = -1 }).Message);
        Assert.Equal("'leakWidths' must be number > 0; got -1", Assert.Throws<DriftWatchException>(() => GatePolicy.Default with { LeakWidths = -1 }).Message);
        Assert.Equal("'purityLowerBound' must be number in (0, 1]; got NaN", Assert.Throws<DriftWatchException>(() => GatePolicy.Default with { PurityLowerBound = double.NaN }).Message);
        Assert.Equal("'cusumThreshold' must be number > 0; got Infinity",
            Assert.Throws<DriftWatchException>(() => GatePolicy.Default with { CusumThreshold = double.PositiveInfinity }).Message);
        Assert.Equal(1, GatePolicy.Default.WarmupEpochs);
    }

    [Fact]
    public void HaltOnDefaultThrowsAtOnceInsteadOfLaterInSeverityOf()
    {
        var e = Assert.Throws<DriftWatchException>(() => GatePolicy.Default with { HaltOn = default });

        Assert.StartsWith("'haltOn' must be array of Leak, ", e.Message);
        Assert.Contains("; got no array", e.Message);
        Assert.Empty((GatePolicy.Default with { HaltOn = [] }).HaltOn);
    }

    // Values the setting refuses, as a file writes them, with the same value for a property where one exists.
    private static IEnumerable<(string Json, object? Value)> BadValues(PolicySetting setting)
    {
        yield return ("\"x\"", null);
        yield return ("null", null);
        if (setting.Integers is { } integers)
        {
            yield return ("1.5", null);
            if (integers.Minimum > int.MinValue)
                yield return (Text(integers.Minimum - 1), (int)(integers.Minimum - 1));
            if (integers.Maximum < int.MaxValue)
                yield return (Text(integers.Maximum + 1), (int)(integers.Maximum + 1));
            else
                yield return ("2147483648", null);
        }
        else if (setting.Numbers is { } numbers)
        {
            yield return ("1e999", null);
            double below = numbers.IncludesMinimum ? numbers.Minimum - 0.5 : numbers.Minimum;
            yield return (Text(below), below);
            if (double.IsFinite(numbers.Maximum))
            {
                double above = numbers.IncludesMaximum ? numbers.Maximum + 0.5 : numbers.Maximum;
                yield return (Text(above), above);
            }
        }
        else if (setting.Key == "haltOn")
        {
            yield return ("[\"Leak\", \"Panic\"]", null);
            yield return ("[1]", null);
            yield return ("{}", null);
        }
        else
        {
            yield return ("1", null);
        }
    }

    private static string Text(double value) => value.ToString("R", CultureInfo.InvariantCulture);

    private static string Text(long value) => value.ToString(CultureInfo.InvariantCulture);
}
