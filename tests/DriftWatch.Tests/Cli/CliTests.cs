using System.Text;
using System.Text.Json;
using DriftWatch.Cli;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Cli;

public sealed class CliTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public CliTests(DemoStoreFixture fixture) => _fixture = fixture;

    private static (int Code, string Output, string Error) Run(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    [Fact]
    public void RunsListsBothRunsWithTheirStatus()
    {
        var (code, output, _) = Run("runs", "--store", _fixture.StorePath);

        Assert.Equal(ExitCodes.Fine, code);
        Assert.Contains(DemoStoreFixture.LeakRun, output);
        Assert.Contains(DemoStoreFixture.CleanRun, output);
        Assert.Contains("Halt", output);
    }

    [Fact]
    public void ShowPrintsOneRowPerEpochAndTheFindingsWithTheirOwnSeverity()
    {
        var (code, output, _) = Run("show", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--top", "2");

        Assert.Equal(ExitCodes.Fine, code);
        Assert.Contains("inspection tray", output);
        Assert.Matches(@"(?m)^  epochs \S+\s+Halt\s+[a-z ]+ 'inspection tray': ", output); // each finding once per span, with its own severity
        Assert.Matches(@"(?m)^\s+1\s", output);
    }

    [Fact]
    public void CheckExitsOneOnHaltAndZeroOtherwise()
    {
        var halt = Run("check", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath);
        var json = Run("check", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--json");

        Assert.Equal(ExitCodes.Halt, halt.Code);
        Assert.Contains("advice to a person, not proof", halt.Output);
        Assert.Equal(ExitCodes.Halt, json.Code);
        using var document = JsonDocument.Parse(json.Output);
        Assert.True(document.RootElement.GetProperty("halt_advised").GetBoolean());
        Assert.Contains(document.RootElement.GetProperty("findings").EnumerateArray(), f => f.GetProperty("feature").GetString() == "inspection tray");
    }

    [Fact]
    public void CheckUnderAPolicyThatNeverHaltsExitsZero()
    {
        string policy = Path.Combine(_fixture.Folder, "no-halt.json");
        File.WriteAllText(policy, """{ "haltOn": [] }""");

        var (code, output, _) = Run("check", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--policy", policy);

        Assert.Equal(ExitCodes.Fine, code);
        Assert.Contains("Caution", output);
    }

    [Fact]
    public void ChartWritesThePngItNames()
    {
        string folder = Path.Combine(_fixture.Folder, "cli-charts");

        var (code, output, _) = Run("chart", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--out", folder, "--width", "900", "--height", "600");

        Assert.Equal(ExitCodes.Fine, code);
        string path = output.Trim().Split('\n')[^1].Trim();
        Assert.True(File.Exists(path), path);
        Assert.StartsWith(folder, path, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("missing")]
    [InlineData("folder")]
    [InlineData("foreign")]
    [InlineData("unknown-run")]
    [InlineData("bad-top")]
    [InlineData("bad-policy")]
    public void BadInputGetsOneLineAndExitTwoAndLeavesTheStoreAlone(string what)
    {
        using var temp = new TempFolder();
        string foreign = temp.File("notes.txt");
        File.WriteAllText(foreign, new string('x', 20_000));
        string policy = temp.File("bad.json");
        File.WriteAllText(policy, """{ "patience": -1 }""");
        byte[] before = File.ReadAllBytes(_fixture.StorePath);
        string[] args = what switch
        {
            "missing" => ["runs", "--store", temp.File("absent.litedb")],
            "folder" => ["runs", "--store", temp.Path],
            "foreign" => ["show", "x", "--store", foreign],
            "unknown-run" => ["show", "no-such-run", "--store", _fixture.StorePath],
            "bad-top" => ["show", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--top", "0"],
            _ => ["check", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--policy", policy],
        };

        var (code, output, error) = Run(args);

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Single(error.Trim().Split('\n'));
        Assert.StartsWith("error: ", error, StringComparison.Ordinal);
        Assert.Equal("", output);
        Assert.Equal(before, File.ReadAllBytes(_fixture.StorePath));
        Assert.False(File.Exists(temp.File("absent.litedb")));
    }

    [Fact]
    public void HelpNamesEveryCommandAndTheExitCodes()
    {
        var (code, output, _) = Run("--help");

        Assert.Equal(0, code);
        foreach (string verb in new[] { "runs", "show", "chart", "check" })
            Assert.Contains(verb, output);
        Assert.Contains("1 the verdict is Halt", output);
    }

    [Fact]
    public void NamesFromUsersDataCannotBreakTheTable()
    {
        Assert.Equal("a\\nb|c", DriftWatch.Charts.DisplayText.Clean("a\nb|c"));
        Assert.DoesNotContain("\u001b", DriftWatch.Charts.DisplayText.Clean("x\u001b[31mred"), StringComparison.Ordinal);
        Assert.Equal(Encoding.UTF8.GetByteCount("plain"), Encoding.UTF8.GetByteCount(DriftWatch.Charts.DisplayText.Clean("plain")));
    }
}
