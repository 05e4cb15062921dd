using DriftWatch.Detection;
using Xunit;
using static DriftWatch.Tests.Detection.HistoryBuilder;

namespace DriftWatch.Tests.Detection;

// Synthetic histories built in the test (no training), one per label type: binary 0/1 and ±1 with the logit, three
// classes attributed towards each row's own class or one class's output (one-vs-rest), and a continuous target. The
// label rules fire where a fault is planted and stay quiet where none is, for every label type they can read; where they
// cannot, the verdict says so once.
public sealed class LabelKindDetectionTests
{
    // The modes by name (the builder is internal to the tests).
    public static TheoryData<string> Readable => [nameof(LabelMode.ZeroOne), nameof(LabelMode.PlusMinus), nameof(LabelMode.ThreeClasses), nameof(LabelMode.ClassOne), nameof(LabelMode.Regression)];

    private static HistoryBuilder Builder(string labels) => new HistoryBuilder().WithLabels(Enum.Parse<LabelMode>(labels));

    private static IEnumerable<Finding> All(List<Assessment> run) => run.SelectMany(a => a.Verdict.Findings);

    [Theory]
    [MemberData(nameof(Readable))]
    public void AStableHistoryRaisesNothingAndSaysNothingIsUnchecked(string labels)
    {
        var run = Builder(labels).WithSeed(2).Run(12);

        Assert.Empty(All(run));
        Assert.All(run, a => Assert.Empty(a.Verdict.Reasons));
        // Genuine features agree with the label on 75% of rows on both halves: alignment 0.75 − 0.25 = 0.5 (scores of one size on average).
        Assert.Equal(0.5, run.Average(a => a.Statistics.AlignmentHeldOut[0]), 0.05);
        Assert.Equal(0.5, run.Average(a => a.Statistics.AlignmentTraining[0]), 0.05);
    }

    [Theory]
    [MemberData(nameof(Readable))]
    public void AMemorisedIdentifierIsNamedForEveryLabelType(string labels)
    {
        var run = Builder(labels).WithMemorisedCrate(fromEpoch: 3).Run(7);

        var finding = Assert.Single(run[4].Verdict.Findings);
        Assert.Equal(FindingKind.MemorisedIdentifier, finding.Kind);
        Assert.Equal("crate id", finding.Feature);
        Assert.All(run.Take(3), a => Assert.Empty(a.Verdict.Findings));
        Assert.True(run[4].Statistics.AlignmentTraining[Crate] > 0.9);
        Assert.True(Math.Abs(run[4].Statistics.AlignmentHeldOut[Crate]) < 0.2);
    }

    [Theory]
    [MemberData(nameof(Readable))]
    public void ACategoricalThatPointsAtTheLabelEverywhereIsAProbableLeakForEveryLabelType(string labels)
    {
        var planted = Builder(labels).WithDominant(Tray, fromEpoch: 2, pureValue: true).Run(6);
        var genuine = Builder(labels).WithDominant(Tray, fromEpoch: 2, pureValue: false).Run(6);

        var finding = Assert.Single(planted[3].Verdict.Findings);
        Assert.Equal(FindingKind.ProbableLeak, finding.Kind);
        Assert.Equal("tray", finding.Feature);
        Assert.Equal(FindingKind.DominantFeature, Assert.Single(genuine[3].Verdict.Findings).Kind);
    }

    [Fact]
    public void WithTheRowsOwnClassAHeldOutRowEchoesATrainingRowOfAnotherClass()
    {
        // Held-out row r shares its crate with a training row of another class (126 of the 128 share): a model that echoes
        // the training row's class scores the held-out row against its own class.
        var run = new HistoryBuilder().WithLabels(LabelMode.ThreeClasses).WithMemorisedCrate(fromEpoch: 1).WithSharedCrates(echo: true).Run(6);

        var finding = All(run).First(f => f.Kind == FindingKind.MemorisedIdentifier);
        Assert.Contains("on 126 of 126 held-out rows whose value also sits on training probe rows, the attribution points at that training label, including 126 of the 126 whose own label differs", finding.Evidence);
    }

    [Fact]
    public void ClassLabelsWithTheLogitSayOnceThatTheLabelRulesDoNotRun()
    {
        var run = new HistoryBuilder().WithLabels(LabelMode.ClassesWithLogit).WithMemorisedCrate(fromEpoch: 3).Run(7);

        var notes = run.SelectMany(a => a.Verdict.Reasons).Where(r => r.StartsWith("not checked:", StringComparison.Ordinal)).ToList();
        string note = Assert.Single(notes);
        Assert.Contains("label alignment needs the row's true class (target 'true class') or one class's output (target 'class N') for 3-class labels; the run attributes the logit", note);
        Assert.Equal(note, run[1].Verdict.Reasons.Single()); // the first epoch after the warm-up, before any finding
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.MemorisedIdentifier);
        Assert.Empty(run[1].Statistics.AlignmentGap);
    }
}
