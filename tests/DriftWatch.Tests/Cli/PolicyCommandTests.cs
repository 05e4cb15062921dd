using DriftWatch.Detection;
using DriftWatch.Tests.Reliability;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Cli;

// `policy` prints the gate's settings from the one table that also reads and checks policy files (common practice:
// help text and parser from one declaration cannot disagree).
public sealed class PolicyCommandTests
{
    [Fact]
    public void EverySettingIsListedWithItsValueWhatItAcceptsAndWhatItMeans()
    {
        var (code, output, error) = SampleStore.Cli("policy");

        Assert.Equal(0, code);
        Assert.Equal("", error);
        foreach (var setting in GatePolicy.Settings)
        {
            Assert.Contains($"{setting.Key} ", output, StringComparison.Ordinal);
            Assert.Contains($"accepts {setting.Allowed}. {setting.Meaning}", output, StringComparison.Ordinal);
        }
        Assert.DoesNotContain(" *", output, StringComparison.Ordinal);
    }

    [Fact]
    public void TheJsonIsACompletePolicyFileThatReadsBackAsTheBuiltInPolicy()
    {
        var (code, output, _) = SampleStore.Cli("policy", "--json");

        Assert.Equal(0, code);
        Assert.Equal(GatePolicy.Default.ToJson(), output.TrimEnd());
        Assert.Equal(GatePolicy.Default, GatePolicy.Parse(output));
    }

    [Fact]
    public void AFilesChangedValuesAreMarkedAndABadFileIsOneLineNamingEveryProblem()
    {
        using var folder = new TempFolder();
        File.WriteAllText(folder.File("good.json"), """{ "patience": 3, "haltOn": ["Leak"] }""");
        File.WriteAllText(folder.File("bad.json"), """{ "patience": 0, "leakWidths": -1 }""");

        var (code, output, _) = SampleStore.Cli("policy", "--policy", folder.File("good.json"));
        var (badCode, badOutput, badError) = SampleStore.Cli("policy", "--policy", folder.File("bad.json"));

        Assert.Equal(0, code);
        Assert.Contains("patience                      3 *  (built-in 2)", output, StringComparison.Ordinal);
        Assert.Contains("""haltOn                        ["Leak"] *""", output, StringComparison.Ordinal);
        Assert.Contains("warmupEpochs                  1\n", output.ReplaceLineEndings("\n"), StringComparison.Ordinal);
        Assert.Equal(2, badCode);
        Assert.Equal("", badOutput);
        string line = Assert.Single(badError.Trim().Split('\n'));
        Assert.Contains("'patience' must be integer ≥ 1; got 0", line, StringComparison.Ordinal);
        Assert.Contains("'leakWidths' must be number > 0; got -1", line, StringComparison.Ordinal);
    }
}
