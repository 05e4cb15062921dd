using DriftWatch.Charts;
using DriftWatch.Detection;
using DriftWatch.Detection.Rules;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Charts;

public sealed class EvidenceChartTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public EvidenceChartTests(DemoStoreFixture fixture) => _fixture = fixture;

    public static TheoryData<string> KindNames()
    {
        var data = new TheoryData<string>();
        foreach (var kind in FindingRules.Kinds)
            data.Add(kind.Kind.Name);
        return data;
    }

    [Fact]
    public void EveryRegisteredFindingKindHasAnEvidenceChartAndASpellingThatParsesBack()
    {
        foreach (var info in FindingRules.Kinds)
        {
            Assert.True(EvidencePlans.For(info.Kind) is not null, $"finding kind {info.Kind.Name} has no evidence chart: add its entry to EvidencePlans.ByKind");
            Assert.Equal(info.Kind, ChartCatalog.ParseFinding(ChartCatalog.Spelling(info.Kind)));
        }
        Assert.Equal("memorised-identifier", ChartCatalog.Spelling(FindingKind.MemorisedIdentifier));
        var e = Assert.Throws<DriftWatchException>(() => ChartCatalog.ParseFinding("pie"));
        Assert.StartsWith("--finding must be one of leak, ", e.Message, StringComparison.Ordinal);
    }

    [Theory]
    [MemberData(nameof(KindNames))]
    public void EachKindsEvidenceChartIsAPngOfTheAskedSizeAndNotBlank(string name)
    {
        var kind = new FindingKind(name);
        bool named = EvidencePlans.For(kind)!.NamesFeature;
        using var temp = new TempFolder();
        string path = temp.File("built.litedb");
        new StoreBuilder().WithEpochs(14).WithFinding(kind, named ? 1 : -1, fromEpoch: 6, VerdictKind.Halt).Build(path);

        IReadOnlyList<(ChartKind Kind, string Path)> written;
        using (var store = RunStore.OpenForReading(path))
        {
            var history = RunHistory.Load(store, "built-run");
            Assert.Equal(kind, ChartCatalog.MostSevere(history)!.Kind);
            Assert.Equal([ChartKind.Evidence, ChartKind.Trend], ChartCatalog.Leading(history));
            written = ChartCatalog.RenderAll(store, history, [ChartKind.Evidence], new ChartOptions(), temp.File("charts"), new ChartSize(1100, 760));
        }

        var (_, png) = Assert.Single(written);
        Assert.Contains("-evidence", Path.GetFileName(png), StringComparison.Ordinal);
        PngAssert.IsChart(png, 1100, 760);
    }

    [Fact]
    public void TheLeakRunLeadsWithTheLeakEvidenceOfTheTrayAndDrawsItAtTwoSizes()
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var history = RunHistory.Load(store, DemoStoreFixture.LeakRun);
        var worst = ChartCatalog.MostSevere(history)!;

        // The demo planted the leak in the inspection tray (demo/README.md, ground truth); it halted on it.
        Assert.Equal(FindingKind.Leak, worst.Kind);
        Assert.Equal(VerdictKind.Halt, worst.Severity);
        Assert.Equal((FindingKind.Leak, "inspection tray"), new EvidenceChart().Choose(history));
        foreach (var size in new[] { ChartSize.Default, new ChartSize(800, 500) })
        {
            var written = ChartCatalog.RenderAll(store, history, ChartCatalog.Leading(history), new ChartOptions(), Path.Combine(_fixture.Folder, $"evidence-{size.Width}"), size);
            Assert.Equal([ChartKind.Evidence, ChartKind.Trend], written.Select(w => w.Kind));
            foreach (var (_, png) in written)
                PngAssert.IsChart(png, size.Width, size.Height);
        }
    }

    [Fact]
    public void TheCusumPanelFollowsPagesRecursionOverTheStoredGap()
    {
        using var temp = new TempFolder();
        string path = temp.File("built.litedb");
        new StoreBuilder().WithEpochs(8).WithFinding(FindingKind.MemorisedIdentifier, 0, fromEpoch: 3).Build(path);
        using var store = RunStore.OpenForReading(path);
        var history = RunHistory.Load(store, "built-run");
        var policy = GatePolicy.Default;

        var sums = EvidencePlans.Cusum(history, 0, policy);

        // Page (1954): S_t = max(0, S_{t−1} + z_t − K), S_0 = 0, here with z_t the gap over its standard error W / 3.29
        // (a 90% width is 2 × 1.645 standard errors, from the normal quantile — common practice).
        double expected = 0;
        foreach (var epoch in history.Epochs.Where(e => e.Epoch >= policy.WarmupEpochs))
        {
            var s = epoch.Statistics!;
            expected = Math.Max(0, expected + s.AlignmentGap[0] / (s.AlignmentGapWidth[0] / 3.29) - policy.IdentifierCusumAllowance);
            Assert.Equal(expected, sums[epoch.Epoch], 12);
        }
        Assert.Equal(history.Epochs.Count(e => e.Epoch >= policy.WarmupEpochs), sums.Count);
    }

    [Fact]
    public void SignAgreementPerHalfCountsRowsWhoseScorePointsAtTheirLabel()
    {
        using var temp = new TempFolder();
        string path = temp.File("built.litedb");
        new StoreBuilder().WithEpochs(3).Build(path);
        using var store = RunStore.OpenForReading(path);
        var history = RunHistory.Load(store, "built-run", rowsOf: ["beta"]);

        var agreement = EvidencePlans.Agreement(history, 1);

        // StoreBuilder labels row r with r mod 2 (0/1): the sign is +1 on odd rows, −1 on even ones.
        var rows = history.Rows[0].Epochs[^1];
        int heldOut = Enumerable.Range(0, rows.HeldOut.Length).Count(r => rows.HeldOut[r] * (r % 2 == 1 ? 1 : -1) > 0);
        int n = rows.HeldOut.Length + rows.Training.Length;
        int training = Enumerable.Range(0, rows.Training.Length).Count(r => rows.Training[r] * ((rows.HeldOut.Length + r) % 2 == 1 ? 1 : -1) > 0);
        var (h, t, lower) = agreement[rows.Epoch];
        Assert.Equal((double)heldOut / rows.HeldOut.Length, h, 12);
        Assert.Equal((double)training / rows.Training.Length, t, 12);
        // Wilson (1927) score interval, lower end, z = 1.645 for one-sided 95% (normal quantile, common practice).
        double p = (double)(heldOut + training) / n, z = 1.645;
        double wilson = (p + z * z / (2 * n) - z * Math.Sqrt(p * (1 - p) / n + z * z / (4.0 * n * n))) / (1 + z * z / n);
        Assert.Equal(wilson, lower, 9);
    }

    [Fact]
    public void MostSevereTakesHaltBeforeCautionAndAClearRunHasNone()
    {
        using var temp = new TempFolder();
        string caution = temp.File("caution.litedb");
        new StoreBuilder().WithEpochs(6).WithFinding(FindingKind.DominantFeature, 0, fromEpoch: 2, VerdictKind.Caution).Build(caution);
        string clear = temp.File("clear.litedb");
        new StoreBuilder().WithEpochs(4).Build(clear);

        using (var store = RunStore.OpenForReading(caution))
        {
            var history = RunHistory.Load(store, "built-run");
            Assert.Equal(VerdictKind.Caution, ChartCatalog.MostSevere(history)!.Severity);
            Assert.Equal((FindingKind.DominantFeature, "alpha"), new EvidenceChart().Choose(history));
        }
        using (var store = RunStore.OpenForReading(clear))
        {
            var history = RunHistory.Load(store, "built-run");
            Assert.Null(ChartCatalog.MostSevere(history));
            Assert.Equal([ChartKind.Trend], ChartCatalog.Leading(history));
            // A run with no finding still gets an evidence chart in a full set: the leak rule's statistics of its top feature.
            Assert.Equal(FindingKind.Leak, new EvidenceChart().Choose(history).Kind);
        }
    }
}
