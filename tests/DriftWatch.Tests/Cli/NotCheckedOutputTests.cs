using DriftWatch.Cli;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Cli;

// A run whose labels the label rules cannot read (3 classes, the logit attributed) says so once in show, check and the
// report; a binary run says nothing of the kind.
public sealed class NotCheckedOutputTests
{
    private const string Note = "not checked: the label rules (leak by alignment, memorised identifier, probable leak) — label alignment needs the row's true class";

    private static (int Code, string Output) Run(params string[] args)
    {
        var output = new StringWriter();
        int code = CliApp.Run(args, output, new StringWriter());
        return (code, output.ToString());
    }

    private static int Count(string text, string part) => (text.Length - text.Replace(part, "", StringComparison.Ordinal).Length) / part.Length;

    [Theory]
    [InlineData(3, 1)]
    [InlineData(2, 0)]
    public void ShowCheckAndTheReportSayOnceWhichLabelRulesDidNotRun(int classes, int expected)
    {
        using var temp = new TempFolder();
        string store = temp.File("store.litedb");
        new StoreBuilder().WithClassLabels(classes).Build(store);

        var (showCode, show) = Run("show", "built-run", "--store", store);
        var (checkCode, check) = Run("check", "built-run", "--store", store);
        var (replayCode, replay) = Run("check", "built-run", "--store", store, "--json");
        var (reportCode, report) = Run("report", "built-run", "--store", store, "--out", temp.File("report"));

        Assert.Equal([ExitCodes.Fine, ExitCodes.Fine, ExitCodes.Fine, ExitCodes.Fine], new[] { showCode, checkCode, replayCode, reportCode });
        Assert.Equal(expected, Count(show, Note));
        Assert.Equal(expected, Count(check, Note));
        Assert.Equal(expected, Count(replay, "\"not_checked\":\"not checked:"));
        string markdown = File.ReadAllText(report.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries)[1]);
        Assert.Equal(expected, Count(markdown, Note));
        if (expected == 1)
            Assert.Contains("for 3-class labels; the run attributes the logit", show, StringComparison.Ordinal);
    }
}
