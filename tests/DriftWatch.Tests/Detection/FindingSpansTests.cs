using DriftWatch.Detection;
using Xunit;

namespace DriftWatch.Tests.Detection;

public sealed class FindingSpansTests
{
    private static Finding Leak(string feature, double size, int since) =>
        new(FindingKind.Leak, VerdictKind.Halt, feature, size, 0.01, new EpochSpan(since, since), $"{feature} {size}");

    private static Verdict At(int epoch, params Finding[] findings) =>
        new(epoch, findings.Length == 0 ? VerdictKind.Continue : VerdictKind.Halt, [], [.. findings]);

    [Fact]
    public void ConsecutiveStoredVerdictsWithTheSameKindAndFeatureAreOneSpanAndAGapStartsAnother()
    {
        // Epoch 5 was not stored: 4 and 6 are consecutive stored verdicts, so the span runs on across it.
        var verdicts = new[]
        {
            At(1),
            At(2, Leak("crate", 0.10, 1)),
            At(3, Leak("crate", 0.12, 1), Leak("tray", 0.20, 3)),
            At(4, Leak("crate", 0.14, 1)),
            At(6, Leak("crate", 0.16, 1)),
            At(7),
            At(8, Leak("crate", 0.30, 8)),
        };

        var spans = FindingSpans.Collapse(verdicts);

        Assert.Equal(
            [("crate", 2, 6, 4, 1, 0.16), ("tray", 3, 3, 1, 3, 0.20), ("crate", 8, 8, 1, 8, 0.30)],
            spans.Select(s => (s.Feature, s.FromEpoch, s.ToEpoch, s.EpochCount, s.SinceEpoch, s.Latest.Size)));
        Assert.Equal("crate 0.16", spans[0].Latest.Evidence);
    }

    [Fact]
    public void AFindingOnlyOtherMethodsShowedIsASpanOfItsOwn()
    {
        var other = Leak("crate", 0.5, 1) with { SeenOnlyBy = ["smoothgrad"] };
        var spans = FindingSpans.Collapse([At(1, Leak("crate", 0.1, 1), other), At(2, other)]);

        Assert.Equal([(1, 1, false), (1, 2, true)], spans.Select(s => (s.FromEpoch, s.ToEpoch, s.Latest.IsSeenByOtherMethodsOnly)));
    }

    [Fact]
    public void VerdictsOutOfOrderAreRefused()
    {
        Assert.Throws<ArgumentException>(() => FindingSpans.Collapse([At(2), At(1)]));
    }

    [Fact]
    public void AMeasureNeverMixesAGeneralisationLossPercentWithANoiseFloor()
    {
        var overfitting = new Finding(FindingKind.Overfitting, VerdictKind.Halt, "", 7.5, 5, EpochSpan.At(4), "GL");
        var leak = Leak("crate", 0.12, 1);
        var statistics = new EpochStatistics { Epoch = 4, Trusted = true, ShareGap = [0.12], AlignmentGap = [0.3] };

        Assert.Equal(("generalisation_loss", "percent", "policy_bound"), Names(FindingMeasures.Of(overfitting, null, -1)));
        Assert.Equal(("share_gap", "share", "noise_floor"), Names(FindingMeasures.Of(leak, statistics, 0)));
        Assert.Equal(("alignment_gap", "alignment", "noise_floor"), Names(FindingMeasures.Of(leak with { Size = 0.3 }, statistics, 0)));
    }

    private static (string Statistic, string Unit, string Bound) Names(DriftWatch.Detection.Rules.FindingMeasure measure) => (measure.Statistic, measure.Unit, measure.Bound);
}
