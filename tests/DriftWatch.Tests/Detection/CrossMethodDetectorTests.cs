using DriftWatch.Attribution;
using DriftWatch.Detection;
using Xunit;

namespace DriftWatch.Tests.Detection;

public sealed class CrossMethodDetectorTests
{
    private static Dictionary<string, AttributionMap> Maps(params (string Method, EpochEvidence Evidence)[] maps) =>
        maps.ToDictionary(m => m.Method, m => m.Evidence.Map!);

    [Fact]
    public void ALeakSeenByBothMethodsSaysSoAndTheVerdictIsThePrimaryDetectorsOwn()
    {
        var primary = new HistoryBuilder().WithSeed(3).WithLeak(0, fromEpoch: 3);
        var second = new HistoryBuilder().WithSeed(4).WithLeak(0, fromEpoch: 3);
        var alone = new DivergenceDetector(primary.Context(), GatePolicy.Default);
        var both = new CrossMethodDetector(primary.Context(), GatePolicy.Default, ["integrated-gradients", "smoothgrad"]);

        for (int epoch = 0; epoch < 6; epoch++)
        {
            var evidence = primary.Epoch(epoch);
            var expected = alone.Observe(evidence);
            var got = both.Observe(evidence, Maps(("integrated-gradients", evidence), ("smoothgrad", second.Epoch(epoch))));

            Assert.Equal(expected.Verdict.Kind, got.Verdict.Kind);
            Assert.Equal(expected.Verdict.Findings.Select(f => (f.Kind, f.Feature, f.Size)), got.Verdict.Findings.Select(f => (f.Kind, f.Feature, f.Size)));
            Assert.Equal(expected.Statistics.ShareGap, got.Statistics.ShareGap);
        }
        var last = both.Observe(primary.Epoch(6), Maps(("integrated-gradients", primary.Epoch(6)), ("smoothgrad", second.Epoch(6))));
        var leak = Assert.Single(last.Verdict.Findings, f => f.Kind == FindingKind.Leak);
        Assert.Contains("Seen by 2 of 2 methods (integrated-gradients, smoothgrad).", leak.Evidence);
        Assert.Contains("Held-out importance ranks agree with smoothgrad at ρ = ", leak.Evidence);
        Assert.Equal(last.Verdict.Reasons, last.Verdict.Findings.Select(f => f.Evidence));
    }

    [Fact]
    public void ALeakSeenByThePrimaryMethodOnlyIsReportedAsSuch()
    {
        var primary = new HistoryBuilder().WithSeed(3).WithLeak(0, fromEpoch: 2);
        var second = new HistoryBuilder().WithSeed(4);
        var detector = new CrossMethodDetector(primary.Context(), GatePolicy.Default, ["integrated-gradients", "feature-ablation"]);

        Assessment last = null!;
        for (int epoch = 0; epoch < 5; epoch++)
            last = detector.Observe(primary.Epoch(epoch), Maps(("integrated-gradients", primary.Epoch(epoch)), ("feature-ablation", second.Epoch(epoch))));

        var leak = Assert.Single(last.Verdict.Findings, f => f.Kind == FindingKind.Leak);
        Assert.Contains("Seen by integrated-gradients only (feature-ablation does not show it at this epoch): it may be an artefact of that method.", leak.Evidence);
        Assert.Equal(VerdictKind.Halt, last.Verdict.Kind); // the primary method's logic decides, agreement only annotates
    }

    [Fact]
    public void AMissingSecondMapIsNamedAndOneMethodChangesNothing()
    {
        var primary = new HistoryBuilder().WithSeed(3).WithLeak(0, fromEpoch: 2);
        var detector = new CrossMethodDetector(primary.Context(), GatePolicy.Default, ["integrated-gradients", "smoothgrad"]);
        var single = new CrossMethodDetector(primary.Context(), GatePolicy.Default, ["integrated-gradients"]);
        var alone = new DivergenceDetector(primary.Context(), GatePolicy.Default);

        Assessment last = null!, one = null!, plain = null!;
        for (int epoch = 0; epoch < 5; epoch++)
        {
            var evidence = primary.Epoch(epoch);
            last = detector.Observe(evidence, Maps(("integrated-gradients", evidence)));
            one = single.Observe(evidence, Maps(("integrated-gradients", evidence)));
            plain = alone.Observe(evidence);
        }

        Assert.Contains("No map from smoothgrad at this epoch.", Assert.Single(last.Verdict.Findings, f => f.Kind == FindingKind.Leak).Evidence);
        Assert.Equal(string.Join("\n", plain.Verdict.Reasons), string.Join("\n", one.Verdict.Reasons));
    }

    [Fact]
    public void AgreementIsSpearmansRhoAsAGeneralPurposeLibraryComputesIt()
    {
        // Spearman's ρ with average ranks for ties, checked against MathNet.Numerics (a general-purpose library).
        double[] first = [0.4, 0.1, 0.1, 0.25, 0.15, 0.0];
        double[] second = [0.3, 0.2, 0.05, 0.3, 0.1, 0.05];

        double ours = MethodAgreement.Spearman(first, second);

        Assert.Equal(MathNet.Numerics.Statistics.Correlation.Spearman(first, second), ours, 12);
        Assert.True(double.IsNaN(MethodAgreement.Spearman([1.0, 1.0], [0.2, 0.5])));
        Assert.Equal("n/a", MethodAgreement.Format(double.NaN));
    }
}
