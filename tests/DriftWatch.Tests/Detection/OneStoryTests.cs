using DriftWatch.Charts;
using DriftWatch.Charts.Report;
using DriftWatch.Cli;
using DriftWatch.Detection;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Detection;

// One story per run: a finding is told once per span of epochs with its latest evidence, its "covers since" is the epoch
// its evidence names, the overfitting finding points to the features other findings name, and a size is never shown
// without what it measures.
public sealed class OneStoryTests
{
    [Fact]
    public void AFindingRaisedTwiceWithAGapIsTwoStoriesEachToldOnceWithItsLatestEvidence()
    {
        using var temp = new TempFolder();
        string path = temp.File("s.litedb");
        new StoreBuilder().WithEpochs(14).WithLeakStories(1, (3, 6), (10, 13)).Build(path);
        using var store = RunStore.OpenForReading(path);
        var history = RunHistory.Load(store, "built-run");

        var stories = RunFindings.Summarise(history);

        Assert.Equal(2, stories.Count);
        Assert.Equal([new EpochSpan(3, 6), new EpochSpan(10, 13)], stories.Select(s => s.Span));
        Assert.Equal([3, 4, 5, 6], stories[0].FlaggedEpochs.ToArray());
        Assert.All(stories, s => Assert.Contains($"since epoch {s.Since} (at epoch {s.Span.Last})", s.Evidence, StringComparison.Ordinal));
    }

    [Fact]
    public void ShowTellsEachStoryOnceInsteadOfEveryEpochsReasons()
    {
        using var temp = new TempFolder();
        string path = temp.File("s.litedb");
        new StoreBuilder().WithEpochs(14).WithLeakStories(1, (3, 6), (10, 13)).Build(path);
        var output = new StringWriter();

        int code = CliApp.Run(["show", "built-run", "--store", path], output, new StringWriter());

        string text = output.ToString();
        Assert.Equal(ExitCodes.Fine, code);
        Assert.Equal(2, text.Split('\n').Count(l => l.Contains("takes more attribution on training rows", StringComparison.Ordinal)));
        Assert.Contains("epochs 3–6     Halt     leak 'beta': 'beta' takes more attribution on training rows than held-out rows since epoch 3 (at epoch 6)", text, StringComparison.Ordinal);
        Assert.Contains("epochs 10–13   Halt     leak 'beta':", text, StringComparison.Ordinal);
    }

    [Fact]
    public void OverfittingBesideALeakPointsToTheLeakAndNotToADiffuseOverfitting()
    {
        // A leak on 'humidity' from epoch 2 and validation loss rising past GL 5 (Prechelt 1998) from epoch 5.
        double[] validation = [0.9, 0.7, 0.6, 0.61, 0.62, 0.64, 0.66, 0.68];
        var run = new HistoryBuilder().WithLeak(feature: 1, fromEpoch: 2).Run(8, validation: e => validation[e]);

        var overfitting = run.Skip(5).Select(a => a.Verdict.Findings.Single(f => f.Kind == FindingKind.Overfitting)).ToList();
        Assert.All(run.Skip(5), a => Assert.Contains(a.Verdict.Findings, f => f.Kind == FindingKind.Leak && f.Feature == "humidity"));
        Assert.All(overfitting, f => Assert.EndsWith("; see the findings on 'humidity' (leak) at this epoch", f.Evidence, StringComparison.Ordinal));
        Assert.All(overfitting, f => Assert.DoesNotContain("diffuse", f.Evidence, StringComparison.Ordinal));
        // Its span runs from the first epoch above the threshold, and its evidence says so.
        Assert.Equal([new EpochSpan(5, 5), new EpochSpan(5, 6), new EpochSpan(5, 7)], overfitting.Select(f => f.Epochs));
        Assert.All(overfitting, f => Assert.Contains("above it since epoch 5", f.Evidence, StringComparison.Ordinal));
    }

    [Fact]
    public void OverfittingWithNoOtherFindingStillGivesItsOwnDiagnosis()
    {
        double[] validation = [0.9, 0.7, 0.6, 0.61, 0.625, 0.64, 0.66];
        var run = new HistoryBuilder().Run(7, validation: e => validation[e]);

        var finding = Assert.Single(run[6].Verdict.Findings);
        Assert.Equal(FindingKind.Overfitting, finding.Kind);
        Assert.Contains("diffuse", finding.Evidence, StringComparison.Ordinal);
        Assert.Equal(new EpochSpan(5, 6), finding.Epochs);
    }

    [Fact]
    public void EachSizeIsShownWithWhatItMeasuresAndItsUnit()
    {
        var overfitting = new FindingSummary(FindingKind.Overfitting, "", VerdictKind.Halt, [7], 5, 12.34, 5, "validation loss …");
        var leak = new FindingSummary(FindingKind.Leak, "humidity", VerdictKind.Halt, [7], 6, 0.1234, 0.05, "…");
        var failure = new FindingSummary(FindingKind.MonitoringFailure, "", VerdictKind.Caution, [7], 7, 0, 0, "…");

        Assert.Equal("12.3 % generalisation loss", RunReport.SizeText(overfitting));
        Assert.Equal("5.0 % threshold", RunReport.AgainstText(overfitting));
        Assert.Equal("0.123 share or alignment gap", RunReport.SizeText(leak));
        Assert.Equal("0.050 noise floor", RunReport.AgainstText(leak));
        Assert.Equal("-", RunReport.SizeText(failure));
        Assert.Equal("-", RunReport.AgainstText(failure));
    }
}
