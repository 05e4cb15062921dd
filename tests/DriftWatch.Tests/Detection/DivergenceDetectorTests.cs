using DriftWatch.Detection;
using Xunit;

namespace DriftWatch.Tests.Detection;

// Synthetic histories built in the test (no training): each finding kind fires where planted and stays quiet elsewhere.
public sealed class DivergenceDetectorTests
{
    private static IEnumerable<Finding> All(List<Assessment> run) => run.SelectMany(a => a.Verdict.Findings);

    [Theory]
    [InlineData(1)]
    [InlineData(2)]
    [InlineData(3)]
    public void AStableHistoryRaisesNothing(int seed)
    {
        var run = new HistoryBuilder().WithSeed(seed).Run(12);

        Assert.Empty(All(run));
        Assert.All(run, a => Assert.Equal(VerdictKind.Continue, a.Verdict.Kind));
    }

    [Fact]
    public void ALeakFiresOnItsSecondFlaggedEpochAndNamesTheFeature()
    {
        var run = new HistoryBuilder().WithLeak(feature: 1, fromEpoch: 4).Run(8);

        Assert.All(run.Take(5), a => Assert.Equal(VerdictKind.Continue, a.Verdict.Kind));
        var verdict = run[5].Verdict;
        Assert.Equal(VerdictKind.Halt, verdict.Kind);
        var leak = Assert.Single(verdict.Findings);
        Assert.Equal(FindingKind.Leak, leak.Kind);
        Assert.Equal("humidity", leak.Feature);
        Assert.Equal(new EpochSpan(4, 5), leak.Epochs);
        Assert.True(leak.Size > leak.NoiseFloor);
    }

    [Fact]
    public void AChangeInsideTheNoiseFloorNeverFires()
    {
        var run = new HistoryBuilder().WithTrainingNudge(1.03).Run(12);
        var noisy = run.Select(a => a.Statistics).ToList();

        Assert.Empty(All(run));
        Assert.All(noisy, s => Assert.True(Math.Abs(s.ShareGap[0]) < s.ShareGapWidth[0] * 1.5));
    }

    [Fact]
    public void AMemorisedIdentifierIsNamedWhileItsShareGapStaysBlind()
    {
        var run = new HistoryBuilder().WithMemorisedCrate(fromEpoch: 3).Run(7);

        var finding = Assert.Single(run[4].Verdict.Findings);
        Assert.Equal(FindingKind.MemorisedIdentifier, finding.Kind);
        Assert.Equal("crate id", finding.Feature);
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.Leak);
        Assert.True(run[4].Statistics.AlignmentTraining[HistoryBuilder.Crate] > 0.9);
        Assert.True(Math.Abs(run[4].Statistics.AlignmentHeldOut[HistoryBuilder.Crate]) < 0.2);
    }

    [Fact]
    public void SlowMemorisationBelowTheNoiseFloorIsCaughtByAccumulation()
    {
        // Page 1954: a CUSUM accumulates a steady shift too small for any single observation to exceed its limits.
        // Crate ids lean towards the training label in 60% of training rows: an alignment gap near 0.2, about half its noise floor.
        var run = new HistoryBuilder().WithMemorisedCrate(fromEpoch: 1, agreement: 0.2).Run(14);

        var gaps = run.Skip(1).Select(a => a.Statistics.AlignmentGap[HistoryBuilder.Crate] / a.Statistics.AlignmentGapWidth[HistoryBuilder.Crate]).ToList();
        Assert.InRange(gaps.Average(), 0.2, 0.75);
        var finding = run.SelectMany(a => a.Verdict.Findings).First(f => f.Kind == FindingKind.MemorisedIdentifier);
        Assert.Equal("crate id", finding.Feature);
        Assert.Contains("accumulated since epoch", finding.Evidence);
        Assert.DoesNotContain(new HistoryBuilder().Run(14).SelectMany(a => a.Verdict.Findings), f => f.Kind == FindingKind.MemorisedIdentifier);
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void AMemorisedIdentifierReportsEchoesAsSupportingEvidence(bool echo)
    {
        // Held-out rows share crate ids with training rows of the other label: a model that echoes the training label
        // of an id points against the held-out row's own label on every one of them (127 of the 128 held-out rows share).
        var run = new HistoryBuilder().WithMemorisedCrate(fromEpoch: 1).WithSharedCrates(echo).Run(6);

        var finding = run.SelectMany(a => a.Verdict.Findings).First(f => f.Kind == FindingKind.MemorisedIdentifier);
        var counts = System.Text.RegularExpressions.Regex.Match(finding.Evidence, @"echo \(supporting evidence\): on (\d+) of (\d+) held-out rows");
        Assert.True(counts.Success, finding.Evidence);
        Assert.Equal(127, int.Parse(counts.Groups[2].Value, System.Globalization.CultureInfo.InvariantCulture));
        int echoed = int.Parse(counts.Groups[1].Value, System.Globalization.CultureInfo.InvariantCulture);
        if (echo)
        {
            Assert.Equal(127, echoed);
            Assert.Contains("including 127 of the 127 whose own label differs", finding.Evidence);
        }
        else
        {
            Assert.InRange(echoed, 40, 87); // random signs: about half, well inside 127 ± 3.5 standard deviations
        }
    }

    [Fact]
    public void ADominantFeatureThatAgreesWithTheLabelOnlyAsOftenAsGenuineOnesIsACaution()
    {
        var run = new HistoryBuilder().WithDominant(HistoryBuilder.Tray, fromEpoch: 2, pureValue: false).Run(6);

        var finding = Assert.Single(run[3].Verdict.Findings);
        Assert.Equal(FindingKind.DominantFeature, finding.Kind);
        Assert.Equal(VerdictKind.Caution, run[3].Verdict.Kind);
    }

    [Fact]
    public void ADominantCategoricalThatPointsAtTheLabelEverywhereIsAProbableLeak()
    {
        var run = new HistoryBuilder().WithDominant(HistoryBuilder.Tray, fromEpoch: 2, pureValue: true).Run(6);

        var finding = Assert.Single(run[3].Verdict.Findings);
        Assert.Equal(FindingKind.ProbableLeak, finding.Kind);
        Assert.Equal("tray", finding.Feature);
        Assert.Equal(VerdictKind.Halt, run[3].Verdict.Kind);
    }

    [Fact]
    public void ADominantCategoricalThatPointsAtTheLabelOnTrainingRowsOnlyStaysACaution()
    {
        // Pooled over both halves it agrees with the label on 85% of rows, enough for the bound; on held-out rows only
        // as often as genuine features (75%), so it is not called a leak that validation data shares.
        var run = new HistoryBuilder().WithDominant(HistoryBuilder.Tray, fromEpoch: 2, pureValue: true, pureHeldOut: false).Run(6);

        var finding = Assert.Single(run[3].Verdict.Findings);
        Assert.Equal(FindingKind.DominantFeature, finding.Kind);
        Assert.Equal(VerdictKind.Caution, run[3].Verdict.Kind);
    }

    [Fact]
    public void RisingValidationLossIsOverfittingAtTheGl5Epoch()
    {
        // Prechelt 1998: GL5 stops at the first epoch with GL > 5.
        double[] validation = [0.9, 0.7, 0.6, 0.61, 0.625, 0.64, 0.66];
        var run = new HistoryBuilder().Run(7, validation: e => validation[e]);

        Assert.All(run.Take(5), a => Assert.Equal(VerdictKind.Continue, a.Verdict.Kind));
        var finding = Assert.Single(run[5].Verdict.Findings);
        Assert.Equal(FindingKind.Overfitting, finding.Kind);
        Assert.Equal(100 * (0.64 / 0.6 - 1), finding.Size, 9);
        Assert.Contains("diffuse", finding.Evidence);
    }

    [Fact]
    public void APolicyThatDoesNotHaltOnLeaksMakesThemCautions()
    {
        var policy = GatePolicy.Default with { HaltOn = [FindingKind.Overfitting] };
        var run = new HistoryBuilder().WithLeak(feature: 1, fromEpoch: 2).Run(5, policy);

        Assert.Equal(VerdictKind.Caution, run[3].Verdict.Kind);
        Assert.Equal(FindingKind.Leak, Assert.Single(run[3].Verdict.Findings).Kind);
    }

    [Fact]
    public void NaNScoresMakeTheEpochUntrustedAndAreReported()
    {
        var builder = new HistoryBuilder();
        var detector = new DivergenceDetector(builder.Context(), GatePolicy.Default);
        var evidence = builder.Epoch(0);
        evidence.Map!.Scores[5] = float.NaN;

        var assessment = detector.Observe(evidence);

        Assert.False(assessment.Statistics.Trusted);
        Assert.Equal(FindingKind.NumericalTrouble, Assert.Single(assessment.Verdict.Findings).Kind);
    }

    [Fact]
    public void DriftScoresAreBoundedAndZeroForAnUnchangedPicture()
    {
        var builder = new HistoryBuilder();
        var detector = new DivergenceDetector(builder.Context(), GatePolicy.Default);
        detector.Observe(builder.Epoch(0));
        var same = detector.Observe(builder.Epoch(0) with { Epoch = 1 });

        Assert.Equal(0, same.Statistics.Drift, 12);
        Assert.Equal(0, same.Statistics.JensenShannonFromPrevious, 12);
        Assert.Equal(1, same.Statistics.TopFiveJaccard);
    }
}
