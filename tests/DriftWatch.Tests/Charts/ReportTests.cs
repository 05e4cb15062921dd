using AngleSharp.Html.Parser;
using DriftWatch.Charts;
using DriftWatch.Charts.Report;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Markdig;
using Xunit;

namespace DriftWatch.Tests.Charts;

public sealed class ReportTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public ReportTests(DemoStoreFixture fixture) => _fixture = fixture;

    private ReportFiles WriteLeakReport(string folder)
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        return RunReport.Write(store, DemoStoreFixture.LeakRun, folder, new ReportOptions());
    }

    // The (kind, feature) pairs of every finding the monitor stored for the run, read from the store directly.
    private HashSet<(string Kind, string Feature)> StoredFindings(string run)
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var id = store.GetRun(run).Id;
        return store.Verdicts(id).SelectMany(v => v.Findings).Select(f => (f.Kind, f.Feature)).ToHashSet();
    }

    [SkippableFact]
    public void TheReportRendersInHeadlessChromiumWithEveryChartDecodedTheFindingsTableAndNoErrors()
    {
        string chromium = HeadlessChromium.Require();
        var files = WriteLeakReport(Path.Combine(_fixture.Folder, "report-browser"));

        var (dom, log) = HeadlessChromium.DumpDom(chromium, files.Html);

        // The page's own check, run by the browser after load: every <img> complete with a natural width > 0.
        var document = new HtmlParser().ParseDocument(dom);
        var check = document.GetElementById("page-check");
        Assert.NotNull(check);
        Assert.Equal(files.Charts.Count.ToString(System.Globalization.CultureInfo.InvariantCulture), check.GetAttribute("data-images"));
        Assert.Equal(check.GetAttribute("data-images"), check.GetAttribute("data-decoded"));
        Assert.Equal("", check.GetAttribute("data-errors"));
        Assert.Equal(5, files.Charts.Count(c => !Path.GetFileName(c).Contains("-evidence-", StringComparison.Ordinal)));
        // Nothing reached the browser's console: no script error, no blocked load (a content security policy violation logs one).
        Assert.DoesNotContain(":CONSOLE", log, StringComparison.Ordinal);

        var rows = document.QuerySelectorAll("#findings-table tbody tr")
            .Select(r => (r.GetAttribute("data-kind")!, r.GetAttribute("data-feature")!))
            .ToHashSet();
        Assert.Equal(StoredFindings(DemoStoreFixture.LeakRun), rows);
        // The demo planted a leak in the inspection tray (demo/README.md, ground truth): it is a row.
        Assert.Contains(("Leak", "inspection tray"), rows);
        Assert.Contains("advice to a person, not proof", document.GetElementById("caution")!.TextContent, StringComparison.Ordinal);
    }

    [Fact]
    public void TheHtmlIsSelfContained()
    {
        var files = WriteLeakReport(Path.Combine(_fixture.Folder, "report-self"));
        string html = File.ReadAllText(files.Html);
        var document = new HtmlParser().ParseDocument(html);

        Assert.All(document.Images, i => Assert.StartsWith("data:image/png;base64,", i.GetAttribute("src"), StringComparison.Ordinal));
        Assert.Empty(document.QuerySelectorAll("link, script[src], iframe, object, embed"));
        Assert.DoesNotContain("http://", html, StringComparison.Ordinal);
        Assert.DoesNotContain("https://", html, StringComparison.Ordinal);
        Assert.DoesNotContain("@import", html, StringComparison.Ordinal);
        Assert.Contains("default-src 'none'", document.QuerySelector("meta[http-equiv='Content-Security-Policy']")!.GetAttribute("content"), StringComparison.Ordinal);
    }

    [Fact]
    public void TheMarkdownSummaryHoldsTheHeaderTimelineFindingsChartsAndCaution()
    {
        string folder = Path.Combine(_fixture.Folder, "report-md");
        var files = WriteLeakReport(folder);
        string markdown = File.ReadAllText(files.Markdown);
        // Rendered by Markdig, a CommonMark processor, so the assertions read what a Markdown viewer shows.
        var html = new HtmlParser().ParseDocument(Markdown.ToHtml(markdown, new MarkdownPipelineBuilder().UseAdvancedExtensions().Build()));

        Assert.Equal($"Run “{DemoStoreFixture.LeakRun}”", html.QuerySelector("h1")!.TextContent);
        Assert.Equal(["What to look at next", "The run", "Verdict timeline", "Findings", "Trust in the maps", "Charts"], html.QuerySelectorAll("h2").Select(h => h.TextContent));
        Assert.Contains(html.QuerySelectorAll("li"), li => li.TextContent.StartsWith("Check how 'inspection tray' is produced", StringComparison.Ordinal));
        Assert.Contains("Attributions describe the model, not causes", html.QuerySelector("blockquote")!.TextContent, StringComparison.Ordinal);
        Assert.Contains(html.QuerySelectorAll("li"), li => li.TextContent.Contains("Halt", StringComparison.Ordinal));

        var table = html.QuerySelectorAll("table")[1];
        var cells = table.QuerySelectorAll("tbody tr").Select(r => r.QuerySelectorAll("td").Select(c => c.TextContent).ToList()).ToList();
        Assert.Equal(StoredFindings(DemoStoreFixture.LeakRun).Count, cells.Count);
        Assert.All(cells, r => Assert.Equal(8, r.Count));
        Assert.Contains(cells, r => r[0] == "Halt" && r[1] == "leak" && r[2] == "inspection tray");

        var images = html.QuerySelectorAll("img").Select(i => i.GetAttribute("src")!).ToList();
        Assert.Equal(files.Charts.Count, images.Count);
        Assert.Equal(5, images.Count(i => !i.Contains("-evidence-", StringComparison.Ordinal)));
        // The planted leak's finding sits beside its own evidence chart, under a heading that names it.
        Assert.Contains(images, i => i.Contains("-evidence-leak-inspection_tray", StringComparison.Ordinal));
        Assert.Contains(html.QuerySelectorAll("h3"), h => h.TextContent.StartsWith("Halt: leak of “inspection tray”", StringComparison.Ordinal));
        Assert.All(images, src => Assert.True(File.Exists(Path.Combine(folder, src)), $"the Markdown links to {src}, which is not there"));
    }

    [SkippableFact]
    public void NamesFromUsersDataShowAsTextInTheHtmlTheMarkdownAndTheBrowser()
    {
        using var folder = new TempFolder();
        string storePath = folder.File("hostile.litedb");
        const string script = "<script>alert(1)</script>";
        const string pipe = "a|b";
        const string run = "<b>night</b> & `run`";
        new StoreBuilder().WithRun(run).WithFeatures(script, pipe, "plain").WithLeakFinding(feature: 0, fromEpoch: 3).WithEpochs(5).Build(storePath);
        ReportFiles files;
        using (var store = RunStore.OpenForReading(storePath))
            files = RunReport.Write(store, run, folder.File("out"), new ReportOptions());

        var html = new HtmlParser().ParseDocument(File.ReadAllText(files.Html));
        Assert.Equal($"Run “{run}”", html.QuerySelector("h1")!.TextContent);
        Assert.Empty(html.QuerySelectorAll("body script, h1 b"));
        var row = html.QuerySelector("#findings-table tbody tr")!;
        Assert.Equal(script, row.GetAttribute("data-feature"));
        Assert.Equal(script, row.QuerySelectorAll("td")[2].TextContent);

        var markdown = new HtmlParser().ParseDocument(Markdown.ToHtml(File.ReadAllText(files.Markdown), new MarkdownPipelineBuilder().UseAdvancedExtensions().Build()));
        Assert.Equal($"Run “{run}”", markdown.QuerySelector("h1")!.TextContent);
        Assert.Empty(markdown.QuerySelectorAll("script, b, h1 code, table code"));
        var facts = markdown.QuerySelectorAll("table")[0].QuerySelectorAll("tbody tr").Select(r => r.QuerySelectorAll("td").Select(c => c.TextContent).ToList()).ToList();
        Assert.All(facts, r => Assert.Equal(2, r.Count));
        Assert.Contains(facts, r => r[0] == "features" && r[1].Contains($"{script} (dense), {pipe} (dense)", StringComparison.Ordinal));
        var finding = markdown.QuerySelectorAll("table")[1].QuerySelector("tbody tr")!.QuerySelectorAll("td");
        Assert.Equal(8, finding.Length);
        Assert.Equal(script, finding[2].TextContent);

        string chromium = HeadlessChromium.Require();
        var (dom, log) = HeadlessChromium.DumpDom(chromium, files.Html);
        var rendered = new HtmlParser().ParseDocument(dom);
        Assert.Equal("", rendered.GetElementById("page-check")!.GetAttribute("data-errors"));
        Assert.DoesNotContain(":CONSOLE", log, StringComparison.Ordinal);
        Assert.Equal(script, rendered.QuerySelector("#findings-table tbody tr td:nth-child(3)")!.TextContent);
    }
}
