using DriftWatch.Detection;
using Xunit;

namespace DriftWatch.Tests.Detection;

// Warm-up counts epochs as users number them: a warm-up of N ignores the run's first N epochs (1 … N when the run is
// numbered from 1), so warm-up 0 and warm-up 1 never give the same verdicts when a fault is there from the start.
public sealed class WarmupTests
{
    // A leak on 'humidity' from the first epoch, patience 1: the first epoch the attribution rules read names it.
    private static List<Assessment> Run(int warmup, int firstEpoch) =>
        new HistoryBuilder().WithLeak(feature: 1, fromEpoch: firstEpoch).Run(6, GatePolicy.Default with { WarmupEpochs = warmup, Patience = 1 }, firstEpoch: firstEpoch);

    private static int FirstLeak(List<Assessment> run) =>
        run.First(a => a.Verdict.Findings.Any(f => f.Kind == FindingKind.Leak)).Verdict.Epoch;

    [Theory]
    [InlineData(0, 1, 1)]
    [InlineData(1, 1, 2)]
    [InlineData(2, 1, 3)]
    [InlineData(0, 0, 0)]
    [InlineData(1, 0, 1)]
    public void AWarmupOfNIgnoresTheRunsFirstNEpochs(int warmup, int firstEpoch, int firstFlagged)
    {
        var run = Run(warmup, firstEpoch);

        Assert.Equal(firstFlagged, FirstLeak(run));
        Assert.All(run.Where(a => a.Verdict.Epoch < firstFlagged), a => Assert.Empty(a.Verdict.Findings));
    }

    [Fact]
    public void WarmupZeroAndOneDifferOnARunNumberedFromOne()
    {
        var none = Run(0, 1);
        var one = Run(1, 1);

        Assert.NotEmpty(none[0].Verdict.Findings);
        Assert.Empty(one[0].Verdict.Findings);
        Assert.Equal(none.Skip(1).Select(a => a.Verdict.Kind), one.Skip(1).Select(a => a.Verdict.Kind));
    }
}
