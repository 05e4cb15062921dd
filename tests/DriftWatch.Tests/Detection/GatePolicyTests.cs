using DriftWatch.Detection;
using Xunit;

namespace DriftWatch.Tests.Detection;

public sealed class GatePolicyTests
{
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
}
