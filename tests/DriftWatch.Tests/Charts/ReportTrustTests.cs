using AngleSharp.Html.Parser;
using DriftWatch.Charts;
using DriftWatch.Charts.Report;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Markdig;
using Xunit;

namespace DriftWatch.Tests.Charts;

/// <summary>The report's findings seen by one method only and its trust section, with a method name that is hostile markup.</summary>
public sealed class ReportTrustTests
{
    private const string Hostile = "<b>smooth|grad</b>";

    private static (AngleSharp.Html.Dom.IHtmlDocument Html, AngleSharp.Html.Dom.IHtmlDocument Markdown, string MarkdownText) Write(TempFolder temp, string second = Hostile)
    {
        string storePath = temp.File("two.litedb");
        new TwoMethodRun { Second = second }.Build(storePath);
        ReportFiles files;
        using (var store = RunStore.OpenForReading(storePath))
            files = RunReport.Write(store, "two-methods", temp.File("out"), new ReportOptions { Charts = [] });
        string markdown = File.ReadAllText(files.Markdown);
        var parser = new HtmlParser();
        // The Markdown is read as Markdig, a CommonMark processor, renders it.
        return (parser.ParseDocument(File.ReadAllText(files.Html)), parser.ParseDocument(Markdown.ToHtml(markdown, new MarkdownPipelineBuilder().UseAdvancedExtensions().Build())), markdown);
    }

    [Fact]
    public void TheFindingSeenByOneMethodOnlyIsMarkedInBothFilesAndGetsItsOwnNextStep()
    {
        using var temp = new TempFolder();
        var (html, markdown, _) = Write(temp);

        var row = Assert.Single(html.QuerySelectorAll("#findings-table tbody tr"));
        Assert.Equal(Hostile, row.GetAttribute("data-seen-only-by"));
        Assert.Equal("Caution", row.QuerySelectorAll("td")[0].TextContent);
        Assert.Equal($"leak, seen by {Hostile} only", row.QuerySelectorAll("td")[1].TextContent);
        Assert.Equal("humidity", row.QuerySelectorAll("td")[2].TextContent);
        Assert.Empty(html.QuerySelectorAll("main b, td b"));
        Assert.Contains(html.QuerySelectorAll("#next li"), li => li.TextContent.StartsWith($"'humidity' (leak) swung in the maps of {Hostile} only, not in those of integrated-gradients", StringComparison.Ordinal));
        Assert.DoesNotContain(html.QuerySelectorAll("#next li"), li => li.TextContent.StartsWith("Check how", StringComparison.Ordinal)); // no leak of the verdict's method

        var cells = markdown.QuerySelectorAll("table")[1].QuerySelectorAll("tbody tr td").Select(c => c.TextContent).ToList();
        Assert.Equal(8, cells.Count);
        Assert.Equal($"leak, seen by {Hostile} only", cells[1]);
        Assert.Empty(markdown.QuerySelectorAll("b"));
    }

    [Fact]
    public void TheTrustSectionSummarisesEveryMethodsAgreementAndQualityFiguresInBothFiles()
    {
        using var temp = new TempFolder();
        var (html, markdown, text) = Write(temp);

        Assert.Contains("Yeh, Hsieh, Suggala, Inouye, Ravikumar 2019", html.GetElementById("trust")!.TextContent, StringComparison.Ordinal);
        var rows = html.QuerySelectorAll("#trust-table tbody tr").Select(r => r.QuerySelectorAll("td").Select(c => c.TextContent).ToList()).ToList();
        Assert.Equal(2, rows.Count);
        // Relative infidelity 0.01 × (epoch + 1) over epochs 0–4: median 0.030, last 0.050; the other method's 0.5 + 0.1 × epoch: 0.700, 0.900.
        Assert.Equal(["integrated-gradients", "5", "5", "0.030 (0.050)", "0.200 (0.200)"], rows[0].Take(5));
        Assert.Equal([Hostile, "5", "5", "0.700 (0.900)", "0.400 (0.400)"], rows[1].Take(5));
        Assert.Matches(@"^-?\d\.\d\d \(-?\d\.\d\d, \d\)$", rows[1][5]);
        Assert.Equal(10, html.QuerySelectorAll("#trust-epochs tbody tr").Length);
        Assert.Equal(Hostile, html.QuerySelectorAll("#trust-table tbody tr")[1].GetAttribute("data-method"));

        Assert.Contains("## Trust in the maps", text, StringComparison.Ordinal);
        var tables = markdown.QuerySelectorAll("table");
        var summary = tables[2].QuerySelectorAll("tbody tr").Select(r => r.QuerySelectorAll("td").Select(c => c.TextContent).ToList()).ToList();
        Assert.Equal([Hostile, "5", "5", "0.700 (0.900)", "0.400 (0.400)"], summary[1].Take(5));
        var epochs = tables[3].QuerySelectorAll("tbody tr").Select(r => r.QuerySelectorAll("td").Select(c => c.TextContent).ToList()).ToList();
        Assert.Equal(10, epochs.Count);
        Assert.Contains(epochs, r => r[0] == "4" && r[1] == Hostile && r[3] == "0.900" && r[4] == "0.400" && r[5] == "1.8" && r[6] == "0.6" && r[7] == "16");
    }

    [Fact]
    public void ARunWithOneMethodAndNoFiguresSaysHowToGetThem()
    {
        using var temp = new TempFolder();
        string storePath = temp.File("one.litedb");
        new StoreBuilder().WithEpochs(3).Build(storePath);
        ReportFiles files;
        using (var store = RunStore.OpenForReading(storePath))
            files = RunReport.Write(store, "built-run", temp.File("out"), new ReportOptions { Charts = [] });

        var html = new HtmlParser().ParseDocument(File.ReadAllText(files.Html));
        Assert.StartsWith("The run has one method and no quality figures.", html.QuerySelector("#trust p")!.TextContent, StringComparison.Ordinal);
        Assert.Null(html.GetElementById("trust-table"));
    }
}
