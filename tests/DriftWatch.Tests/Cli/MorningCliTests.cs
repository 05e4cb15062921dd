using System.Text.Json;
using DriftWatch.Cli;
using DriftWatch.Tests.Demo;
using Xunit;

namespace DriftWatch.Tests.Cli;

public sealed class MorningCliTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public MorningCliTests(DemoStoreFixture fixture) => _fixture = fixture;

    private static (int Code, string Output, string Error) Run(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    private static string[] Lines(string text) => text.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries);

    [Fact]
    public void ChartKindAllWritesSixPngsAndPrintsTheirPaths()
    {
        string folder = Path.Combine(_fixture.Folder, "cli-all");

        var (code, output, error) = Run("chart", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--kind", "all", "--out", folder);

        Assert.Equal(ExitCodes.Fine, code);
        Assert.Equal("", error);
        var paths = Lines(output);
        Assert.Equal(6, paths.Length);
        Assert.All(paths, p => Assert.True(File.Exists(p), p));
        Assert.Contains(paths, p => p.Contains("-feature-inspection_tray_", StringComparison.Ordinal));
    }

    [Theory]
    [InlineData("--kind", "pie")]
    [InlineData("--feature", "no such feature")]
    [InlineData("--value", "mean")]
    [InlineData("--columns", "9")]
    public void ChartRefusesBadChoicesWithOneLineAndExitTwo(string option, string value)
    {
        var (code, output, error) = Run("chart", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--kind", "feature", option, value, "--out", Path.Combine(_fixture.Folder, "bad"));

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Equal("", output);
        Assert.Single(Lines(error));
        Assert.StartsWith("error:", error, StringComparison.Ordinal);
    }

    [Fact]
    public void ReportPrintsTheHtmlAndMarkdownItWrote()
    {
        string folder = Path.Combine(_fixture.Folder, "cli-report");

        var (code, output, _) = Run("report", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--out", folder);

        Assert.Equal(ExitCodes.Fine, code);
        var paths = Lines(output);
        Assert.Equal(2, paths.Length);
        Assert.EndsWith(".html", paths[0], StringComparison.Ordinal);
        Assert.EndsWith(".md", paths[1], StringComparison.Ordinal);
        Assert.Contains("inspection tray", File.ReadAllText(paths[1]), StringComparison.Ordinal);
    }

    [Fact]
    public void ExportWithJsonReportsTheFilesAndTheirRows()
    {
        string path = Path.Combine(_fixture.Folder, "cli-export", "clean.parquet");

        var (code, output, _) = Run("export", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--format", "parquet", "--out", path, "--json");

        Assert.Equal(ExitCodes.Fine, code);
        using var document = JsonDocument.Parse(output);
        var importance = document.RootElement.GetProperty("importance");
        Assert.Equal(path, importance.GetProperty("path").GetString());
        Assert.True(File.Exists(path));
        Assert.True(File.Exists(document.RootElement.GetProperty("epochs").GetProperty("path").GetString()));
        int epochs;
        using (var store = DriftWatch.Storage.RunStore.OpenForReading(_fixture.StorePath))
            epochs = store.Epochs(store.GetRun(DemoStoreFixture.CleanRun).Id).Count;
        Assert.Equal(epochs, document.RootElement.GetProperty("epochs").GetProperty("rows").GetInt32());
        // Every epoch attributed, × 2 halves × 13 greenhouse features (demo/README.md).
        Assert.Equal(epochs * 2 * 13, importance.GetProperty("rows").GetInt32());
    }

    [Fact]
    public void ExportToAFolderIsRefused()
    {
        var (code, _, error) = Run("export", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--out", _fixture.Folder);

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Contains("is a folder; pass a file name", error, StringComparison.Ordinal);
    }

    [Fact]
    public void CompareOfARunWithItselfAcrossTwoStoreOptionsGivesRhoOneAtEveryEpoch()
    {
        var (code, output, _) = Run("compare", DemoStoreFixture.LeakRun, DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--store-b", _fixture.StorePath, "--json", "--no-chart");

        Assert.Equal(ExitCodes.Fine, code);
        using var document = JsonDocument.Parse(output);
        var epochs = document.RootElement.GetProperty("epochs").EnumerateArray().ToList();
        Assert.NotEmpty(epochs);
        Assert.All(epochs, e => Assert.Equal(1.0, e.GetProperty("heldOutSpearman").GetDouble(), 12));
        Assert.Empty(document.RootElement.GetProperty("onlyInA").EnumerateArray());
        Assert.Equal(JsonValueKind.Null, document.RootElement.GetProperty("chart").ValueKind);
    }

    [Fact]
    public void CompareTextNamesTheFindingOnlyTheLeakRunRaisedAndWritesItsChart()
    {
        string folder = Path.Combine(_fixture.Folder, "cli-compare");

        var (code, output, _) = Run("compare", DemoStoreFixture.LeakRun, DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--out", folder);

        Assert.Equal(ExitCodes.Fine, code);
        Assert.Contains("Findings only A raised:", output, StringComparison.Ordinal);
        Assert.Contains("leak 'inspection tray'", output, StringComparison.Ordinal);
        string chart = Lines(output)[^1]["chart".Length..].Trim();
        Assert.True(File.Exists(chart), chart);
    }

    [Fact]
    public void RunsAndShowSpeakJsonForScripts()
    {
        var runs = Run("runs", "--store", _fixture.StorePath, "--json");
        var show = Run("show", DemoStoreFixture.LeakRun, "--store", _fixture.StorePath, "--json");

        Assert.Equal(ExitCodes.Fine, runs.Code);
        using var list = JsonDocument.Parse(runs.Output);
        Assert.Equal([DemoStoreFixture.LeakRun, DemoStoreFixture.CleanRun], list.RootElement.EnumerateArray().Select(r => r.GetProperty("name").GetString()));
        Assert.Equal("Halt", list.RootElement[0].GetProperty("worstVerdict").GetString());

        Assert.Equal(ExitCodes.Fine, show.Code);
        using var run = JsonDocument.Parse(show.Output);
        int features = run.RootElement.GetProperty("features").GetArrayLength();
        Assert.All(run.RootElement.GetProperty("epochs").EnumerateArray(), e => Assert.Equal(features, e.GetProperty("held_out_share").GetArrayLength()));
        Assert.Contains(run.RootElement.GetProperty("findings").EnumerateArray(), f => f.GetProperty("kind").GetString() == "Leak" && f.GetProperty("feature").GetString() == "inspection tray");
    }

    [Theory]
    [InlineData("runs")]
    [InlineData("show")]
    [InlineData("chart")]
    [InlineData("report")]
    [InlineData("export")]
    [InlineData("compare")]
    [InlineData("check")]
    [InlineData("merge")]
    public void EveryCommandsHelpHasExamplesAndExitCodes(string command)
    {
        var (code, output, _) = Run(command, "--help");

        Assert.Equal(ExitCodes.Fine, code);
        Assert.Contains("Examples:", output, StringComparison.Ordinal);
        Assert.Contains("Exit codes:", output, StringComparison.Ordinal);
    }
}
