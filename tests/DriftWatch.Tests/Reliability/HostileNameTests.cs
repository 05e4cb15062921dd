using DriftWatch.Charts;
using DriftWatch.Cli;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Hostile run names on the command line and in file names: a name starting with '@' is a name, not a response file;
/// chart and report files keep the letters of any script and replace only what is unsafe in a file name.
/// </summary>
public sealed class HostileNameTests
{
    [Fact]
    public void ARunNameStartingWithAnAtSignIsARunNameNotAResponseFile()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        new StoreBuilder().WithRun("@SUM(1+1)").WithEpochs(2).Build(store);

        var (code, output, error) = SampleStore.Cli("check", "@SUM(1+1)", "--store", store);

        Assert.True(code == ExitCodes.Fine, error);
        Assert.Contains("epoch 2", output);
    }

    [Theory]
    [InlineData("Überprüfung-nacht", "Überprüfung-nacht")]
    [InlineData("温室-7", "温室-7")]
    [InlineData("théâtre_été", "théâtre_été")]
    [InlineData("नमस्ते", "नमस्ते")]
    public void ChartFileNamesKeepLettersOfAnyScript(string run, string kept)
    {
        string name = ChartFiles.FileName(run, "trend", "integrated-gradients");

        Assert.Equal($"{kept}-trend-integrated-gradients.png", name);
    }

    [Theory]
    [InlineData("a/b", "a_b_")]
    [InlineData("Nacht: 温室/7", "Nacht__温室_7_")]
    [InlineData("..\\up", "_._up_")]
    [InlineData("tab\there", "tab_here_")]
    public void ChartFileNamesReplaceOnlyCharactersUnsafeInFileNames(string run, string start)
    {
        string name = ChartFiles.SafePart(run);

        Assert.StartsWith(start, name);
        Assert.Matches("_[0-9a-f]{8}$", name); // a changed name carries a hash of the original, so two runs never share a file
        Assert.DoesNotContain('/', name);
        Assert.DoesNotContain('\\', name);
    }

    [Fact]
    public void AChartFileNamePartStaysShortInBytesForNamesOfAnyScript()
    {
        string name = ChartFiles.FileName(new string('温', 200), new string('é', 200), "integrated-gradients");

        Assert.True(System.Text.Encoding.UTF8.GetByteCount(name) <= 255, $"{System.Text.Encoding.UTF8.GetByteCount(name)} bytes: too long for a file name");
    }
}
