using DriftWatch.Attribution;
using DriftWatch.Detection;
using Xunit;

namespace DriftWatch.Tests.Detection;

public sealed class CrossMethodDetectorTests
{
    private static Dictionary<string, AttributionMap> Maps(params (string Method, EpochInput Evidence)[] maps) =>
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

            var own = got.Verdict.Findings.Where(f => !f.IsSeenByOtherMethodsOnly).ToList();
            Assert.True(got.Verdict.Kind >= expected.Verdict.Kind);
            Assert.Equal(expected.Verdict.Findings.Select(f => (f.Kind, f.Feature, f.Size, f.Severity)), own.Select(f => (f.Kind, f.Feature, f.Size, f.Severity)));
            Assert.All(got.Verdict.Findings.Where(f => f.IsSeenByOtherMethodsOnly), f => Assert.Equal(VerdictKind.Caution, f.Severity));
            Assert.Equal(expected.Statistics.ShareGap.ToArray(), got.Statistics.ShareGap.ToArray());
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
    public void ALeakSeenBySecondMethodOnlyIsReportedMarkedAsSuchAndAsksForCautionOnly()
    {
        // The primary method's maps are stable; the second method's show a leak in 'humidity' from epoch 2 on.
        var primary = new HistoryBuilder().WithSeed(3);
        var second = new HistoryBuilder().WithSeed(4).WithLeak(1, fromEpoch: 2);
        var detector = new CrossMethodDetector(primary.Context(), GatePolicy.Default, ["integrated-gradients", "smoothgrad"]);
        var alone = new DivergenceDetector(primary.Context(), GatePolicy.Default);

        var verdicts = new List<Verdict>();
        for (int epoch = 0; epoch < 5; epoch++)
        {
            var evidence = primary.Epoch(epoch);
            Assert.Empty(alone.Observe(evidence).Verdict.Findings); // the primary method alone sees nothing
            verdicts.Add(detector.Observe(evidence, Maps(("integrated-gradients", evidence), ("smoothgrad", second.Epoch(epoch)))).Verdict);
        }

        Assert.All(verdicts.Take(3), v => Assert.Equal(VerdictKind.Continue, v.Kind)); // flagged at epoch 2, a finding after patience 2
        var last = verdicts[^1];
        var leak = Assert.Single(last.Findings);
        Assert.Equal(FindingKind.Leak, leak.Kind);
        Assert.Equal("humidity", leak.Feature);
        Assert.Equal(new[] { "smoothgrad" }, leak.SeenOnlyBy.ToArray());
        Assert.True(leak.IsSeenByOtherMethodsOnly);
        Assert.Equal(VerdictKind.Caution, leak.Severity);
        Assert.Equal(VerdictKind.Caution, last.Kind);
        Assert.Equal(new EpochSpan(2, 4), leak.Epochs);
        Assert.StartsWith("Seen by smoothgrad only: integrated-gradients, whose maps the verdict reads, does not show it at this epoch: 'humidity' takes ", leak.Evidence);
        Assert.Contains("It may be an artefact of that method, or a swing the other methods miss.", leak.Evidence);
        Assert.Contains("It asks for Caution, not Halt, since the verdict's method does not see it (policy key singleMethodMayHalt).", leak.Evidence);
        double rho = MethodAgreement.Spearman(primary.Epoch(4).Map!, second.Epoch(4).Map!, primary.Rows / 2);
        Assert.Equal(rho, leak.Agreement, 12);
        Assert.Contains($"Held-out importance ranks agree with integrated-gradients at ρ = {MethodAgreement.Format(rho)} (smoothgrad).", leak.Evidence);
        Assert.Equal(last.Reasons, last.Findings.Select(f => f.Evidence));

        // Stored and read back, the mark and the agreement survive.
        var back = VerdictDocuments.FromDocument(VerdictDocuments.ToDocument(last, 1));
        Assert.Equal(new[] { "smoothgrad" }, Assert.Single(back.Findings).SeenOnlyBy.ToArray());
        Assert.Equal(rho, back.Findings[0].Agreement, 12);
    }

    [Fact]
    public void APolicyKeyLetsAFindingSeenByAnotherMethodOnlyHalt()
    {
        var primary = new HistoryBuilder().WithSeed(3);
        var second = new HistoryBuilder().WithSeed(4).WithLeak(1, fromEpoch: 2);
        var third = new HistoryBuilder().WithSeed(5).WithLeak(1, fromEpoch: 2);
        var policy = GatePolicy.Parse("""{ "singleMethodMayHalt": true }""");
        var detector = new CrossMethodDetector(primary.Context(), policy, ["integrated-gradients", "smoothgrad", "feature-ablation"]);

        Assessment last = null!;
        for (int epoch = 0; epoch < 5; epoch++)
        {
            last = detector.Observe(primary.Epoch(epoch),
                Maps(("integrated-gradients", primary.Epoch(epoch)), ("smoothgrad", second.Epoch(epoch)), ("feature-ablation", third.Epoch(epoch))));
        }

        Assert.True(policy.SingleMethodMayHalt);
        Assert.False(GatePolicy.Default.SingleMethodMayHalt);
        var leak = Assert.Single(last.Verdict.Findings);
        Assert.Equal(new[] { "smoothgrad", "feature-ablation" }, leak.SeenOnlyBy.ToArray()); // one finding for both methods that see it
        Assert.Equal(VerdictKind.Halt, leak.Severity);
        Assert.Equal(VerdictKind.Halt, last.Verdict.Kind);
        Assert.StartsWith("Seen by smoothgrad and feature-ablation, not by integrated-gradients, whose maps the verdict reads: ", leak.Evidence);
        Assert.DoesNotContain("asks for Caution", leak.Evidence);
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
