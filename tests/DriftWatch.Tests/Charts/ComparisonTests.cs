using DriftWatch.Charts;
using DriftWatch.Charts.Compare;
using DriftWatch.Charts.Report;
using DriftWatch.Detection;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using Xunit;

namespace DriftWatch.Tests.Charts;

public sealed class ComparisonTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public ComparisonTests(DemoStoreFixture fixture) => _fixture = fixture;

    private (RunHistory Leak, RunHistory Clean) Load()
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        return (RunHistory.Load(store, DemoStoreFixture.LeakRun), RunHistory.Load(store, DemoStoreFixture.CleanRun));
    }

    [Fact]
    public void ARunComparedWithItselfHasRankCorrelationOneAtEveryEpochAndNoFindingOfItsOwn()
    {
        var (leak, _) = Load();

        var comparison = RunComparison.Of(leak, leak);

        Assert.Equal(leak.Epochs.Count(e => e.IsAttributed), comparison.Epochs.Length);
        Assert.NotEmpty(comparison.Epochs);
        // Spearman 1904: identical rankings give ρ = 1.
        Assert.All(comparison.Epochs, e => Assert.Equal(1.0, e.HeldOutSpearman, 12));
        Assert.All(comparison.Epochs, e => Assert.Equal(1.0, e.TrainingSpearman, 12));
        Assert.Empty(comparison.OnlyInA);
        Assert.Empty(comparison.OnlyInB);
        Assert.Equal(leak.FeatureNames.ToArray(), comparison.Features.ToArray());
    }

    [Fact]
    public void RankCorrelationBetweenTwoRunsMatchesMathNetsSpearman()
    {
        var (leak, clean) = Load();

        var comparison = RunComparison.Of(leak, clean);

        Assert.NotEmpty(comparison.Epochs);
        foreach (var e in comparison.Epochs)
        {
            // MathNet.Numerics' Spearman (average ranks for ties), a general-purpose library.
            double expected = MathNet.Numerics.Statistics.Correlation.Spearman(e.SharesA, e.SharesB);
            Assert.Equal(expected, e.HeldOutSpearman, 10);
            Assert.True(e.HeldOutSpearman < 1, $"epoch {e.Epoch}: two different runs ranked their features identically");
        }
    }

    [Fact]
    public void FindingsOnlyOneRunRaisedAreListedForThatRun()
    {
        var (leak, clean) = Load();

        var comparison = RunComparison.Of(leak, clean);

        // The leak run names the planted inspection tray (demo/README.md, ground truth); the clean run must not.
        Assert.Contains(comparison.OnlyInA, f => f.Kind == FindingKind.Leak && f.Feature == "inspection tray");
        Assert.DoesNotContain(comparison.OnlyInB, f => f.Feature == "inspection tray" && f.Kind == FindingKind.Leak);
        var keysB = RunFindings.Summarise(clean).Select(f => (f.Kind, f.Feature)).ToHashSet();
        Assert.All(comparison.OnlyInA, f => Assert.DoesNotContain((f.Kind, f.Feature), keysB));
    }

    [Fact]
    public void TheComparisonChartIsAPngOfTheAskedSize()
    {
        var (leak, clean) = Load();
        var comparison = RunComparison.Of(leak, clean);
        string path = Path.Combine(_fixture.Folder, ComparisonChart.FileName(comparison));

        new ComparisonChart().Render(comparison, path, new ChartSize(1000, 640));

        PngAssert.IsChart(path, 1000, 640);
    }
}
