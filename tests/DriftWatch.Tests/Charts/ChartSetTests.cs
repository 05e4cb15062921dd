using DriftWatch.Charts;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Charts;

public sealed class ChartSetTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public ChartSetTests(DemoStoreFixture fixture) => _fixture = fixture;

    [Theory]
    [InlineData(DemoStoreFixture.LeakRun, 1200, 700)]
    [InlineData(DemoStoreFixture.CleanRun, 1200, 700)]
    [InlineData(DemoStoreFixture.CleanRun, 900, 560)]
    public void EveryChartKindIsAPngOfTheAskedSizeAndNotBlank(string run, int width, int height)
    {
        string folder = Path.Combine(_fixture.Folder, $"set-{run}-{width}");
        IReadOnlyList<(ChartKind Kind, string Path)> written;
        using (var store = RunStore.OpenForReading(_fixture.StorePath))
        {
            var history = RunHistory.Load(store, run);
            written = ChartCatalog.RenderAll(store, history, ChartCatalog.All, new ChartOptions(), folder, new ChartSize(width, height));
        }

        Assert.Equal(ChartCatalog.All, written.Select(w => w.Kind));
        Assert.Equal(written.Count, written.Select(w => w.Path).Distinct().Count());
        foreach (var (_, path) in written)
            PngAssert.IsChart(path, width, height);
    }

    [Theory]
    [InlineData(HeatmapValue.SignedMean)]
    [InlineData(HeatmapValue.ShareGap)]
    public void TheSignedAndGapHeatmapsRender(HeatmapValue value)
    {
        string path = Path.Combine(_fixture.Folder, $"heatmap-{value}.png");
        using (var store = RunStore.OpenForReading(_fixture.StorePath))
            new HeatmapChart(value).Render(RunHistory.Load(store, DemoStoreFixture.CleanRun), path, ChartSize.Default);
        PngAssert.IsChart(path, 1200, 700);
    }

    [Fact]
    public void TheLeakRunsFlaggedFeatureIsTheDefaultDetailAndIsDrawnFirstInTheDivergenceChart()
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var history = RunHistory.Load(store, DemoStoreFixture.LeakRun);

        // The demo planted the leak in the inspection tray (demo/README.md, ground truth).
        Assert.Equal("inspection tray", ChartCatalog.DefaultFeature(history));
        var chosen = DivergenceChart.Choose(history, 4);
        Assert.Equal("inspection tray", history.FeatureNames[chosen[0]]);
        Assert.Equal(4, chosen.Distinct().Count());
    }

    [Fact]
    public void FlaggedFeaturesKeepTheirRowsInTheSameReadAsAskingForThemByName()
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var flagged = RunHistory.Load(store, DemoStoreFixture.LeakRun, rowsOf: ["crate id"], rowsOfFlagged: true);
        var named = RunHistory.Load(store, DemoStoreFixture.LeakRun).WithRows(store, ["crate id", "inspection tray"]);

        // Whatever a run flags, the feature chart's default feature comes with the one read.
        foreach (string run in new[] { DemoStoreFixture.LeakRun, DemoStoreFixture.CleanRun })
        {
            var history = RunHistory.Load(store, run, rowsOfFlagged: true);
            Assert.Contains(history.Rows, r => r.Feature == ChartCatalog.DefaultFeature(history));
        }

        // The asked-for feature first, then every feature a finding names (the planted leak among them), each once.
        Assert.Equal("crate id", flagged.Rows[0].Feature);
        Assert.Contains(flagged.Rows, r => r.Feature == "inspection tray");
        Assert.Equal(flagged.Rows.Length, flagged.Rows.Select(r => r.Feature).Distinct().Count());
        foreach (var expected in named.Rows)
        {
            var kept = flagged.Rows.Single(r => r.Feature == expected.Feature);
            Assert.Equal(expected.Epochs.Select(e => e.Epoch), kept.Epochs.Select(e => e.Epoch));
            for (int i = 0; i < expected.Epochs.Length; i++)
            {
                Assert.Equal(expected.Epochs[i].HeldOut.ToArray(), kept.Epochs[i].HeldOut.ToArray());
                Assert.Equal(expected.Epochs[i].Training.ToArray(), kept.Epochs[i].Training.ToArray());
            }
        }
    }

    [Fact]
    public void PerRowScoresOfTheDetailChartAreTheStoredMapColumnSplitByHalf()
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var history = RunHistory.Load(store, DemoStoreFixture.LeakRun, rowsOf: ["crate id"]);
        var run = store.GetRun(DemoStoreFixture.LeakRun);
        var map = store.Maps(run.Id, RunHistory.DefaultMethod)[^1];
        var decoded = DriftWatch.Detection.RunReview.ToMap(map);
        int feature = history.FeatureIndex("crate id");

        var rows = Assert.Single(history.Rows);
        var last = rows.Epochs[^1];
        Assert.Equal(map.Epoch, last.Epoch);
        Assert.Equal(run.HeldOutRows, last.HeldOut.Length);
        Assert.Equal(run.TrainingRows, last.Training.Length);
        for (int r = 0; r < run.HeldOutRows; r++)
            Assert.Equal(decoded[r, feature], last.HeldOut[r]);
        for (int r = 0; r < run.TrainingRows; r++)
            Assert.Equal(decoded[run.HeldOutRows + r, feature], last.Training[r]);
    }

    [Fact]
    public void TheFeatureChartRefusesAFeatureTheRunDoesNotHave()
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var history = RunHistory.Load(store, DemoStoreFixture.CleanRun);

        var e = Assert.Throws<DriftWatchException>(() => new FeatureDetailChart("no such <feature>").Render(history, Path.Combine(_fixture.Folder, "x.png"), ChartSize.Default));
        Assert.Contains("has no feature 'no such <feature>'", e.Message);
    }

    [Fact]
    public void BeyondSixtyFeaturesTheHeatmapSumsTheSmallestIntoOneRowAndStillRenders()
    {
        using var folder = new TempFolder();
        string storePath = folder.File("many.litedb");
        new StoreBuilder().WithManyFeatures(75).WithEpochs(4).Build(storePath);
        using var store = RunStore.OpenForReading(storePath);
        var history = RunHistory.Load(store, "built-run");

        var rows = HeatmapChart.Rows(history);
        Assert.Equal(HeatmapChart.MaximumRows, rows.Count);
        Assert.Equal(75 - 59, rows[^1].Length);
        Assert.Equal(75, rows.Sum(r => r.Length));
        // Rows follow the last epoch's held-out share, largest first.
        var share = history.LastAttributed!.HeldOutShare;
        Assert.True(share[rows[0][0]] >= share[rows[1][0]]);
        Assert.True(rows[^1].All(f => share[f] <= share[rows[^2][0]]));

        string path = folder.File("heatmap-75.png");
        new HeatmapChart().Render(history, path, ChartSize.Default);
        PngAssert.IsChart(path, 1200, 700);
    }

    [Fact]
    public void LongRunsShowFortyEvenlySpacedEpochsInTheDetailChartWithTheFirstAndLast()
    {
        var epochs = Enumerable.Range(1, 500).ToList();
        var thinned = FeatureDetailChart.Thin(epochs);

        Assert.Equal(FeatureDetailChart.MaximumEpochs, thinned.Count);
        Assert.Equal(1, thinned[0]);
        Assert.Equal(500, thinned[^1]);
        Assert.Equal(thinned.Order(), thinned);
        Assert.Equal([3, 5, 7], FeatureDetailChart.Thin([3, 5, 7]));
    }

    [Fact]
    public void ChartsOfARunWithoutStatisticsStillRender()
    {
        using var folder = new TempFolder();
        string storePath = folder.File("plain.litedb");
        new StoreBuilder().WithoutStatistics().WithEpochs(3).Build(storePath);
        using var store = RunStore.OpenForReading(storePath);
        var history = RunHistory.Load(store, "built-run");

        var written = ChartCatalog.RenderAll(store, history, ChartCatalog.All, new ChartOptions(), folder.Path, ChartSize.Default);
        foreach (var (_, path) in written)
            PngAssert.IsChart(path, 1200, 700);
    }
}
