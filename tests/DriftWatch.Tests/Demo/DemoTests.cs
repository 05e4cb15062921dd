using DriftWatch.Demo;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Demo;

public sealed class DemoTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public DemoTests(DemoStoreFixture fixture) => _fixture = fixture;

    [Fact]
    public void TheSmallDemoStoresEveryEpochItRanAndAChart()
    {
        using var temp = new TempFolder();
        var options = DemoOptions.Parse(["--small", "--store", temp.File("ci.litedb")]);
        var output = new StringWriter();

        Assert.Equal(0, GreenhouseTraining.Run(options, output));

        int printed = output.ToString().Split('\n').Count(l => l.StartsWith("epoch ", StringComparison.Ordinal));
        using var store = RunStore.OpenForReading(temp.File("ci.litedb"));
        var run = store.GetRun(options.RunName);
        Assert.Equal(Enumerable.Range(1, printed), store.Epochs(run.Id).Select(e => e.Epoch));
        Assert.Equal(printed, store.Maps(run.Id).Count);
        Assert.True(File.Exists(Path.Combine(temp.Path, "charts", DriftWatch.Charts.ChartFiles.FileName(options.RunName, "trend", "integrated-gradients"))));
        Assert.Contains("driftwatch", output.ToString(), StringComparison.Ordinal);
    }

    [Fact]
    public void ALeakedFeatureRunHaltsAndNamesTheLeak()
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var run = store.GetRun(DemoStoreFixture.LeakRun);
        var verdicts = store.Verdicts(run.Id).Select(VerdictDocuments.FromDocument).ToList();

        var halt = verdicts.First(v => v.IsHalt);
        Assert.Contains(halt.Findings, f => f.Kind == FindingKind.Leak && f.Feature == GreenhouseFeatures.InspectionTray);
        Assert.DoesNotContain(verdicts.SelectMany(v => v.Findings), f => (f.Kind == FindingKind.Leak || f.Kind == FindingKind.MemorisedIdentifier) && f.Feature != GreenhouseFeatures.InspectionTray);
        Assert.Equal(halt.Epoch, store.Epochs(run.Id)[^1].Epoch); // the demo stopped on it
    }

    [Fact]
    public void ACleanRunDoesNotHaltBeforeGl5()
    {
        // Prechelt 1998: GL5 stops at the first epoch with GL(t) = 100 · (E_va(t) / min E_va − 1) > 5.
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var run = store.GetRun(DemoStoreFixture.CleanRun);
        var epochs = store.Epochs(run.Id);
        var gl = Statistics.GeneralisationLoss(epochs.Select(e => e.Metrics[MetricKeys.ValidationLoss]).ToArray());
        int gl5 = Array.FindIndex(gl, g => g > 5);
        var verdicts = store.Verdicts(run.Id).Select(VerdictDocuments.FromDocument).ToList();

        int firstHalt = verdicts.FindIndex(v => v.IsHalt);
        Assert.True(firstHalt < 0 || (gl5 >= 0 && firstHalt >= gl5), $"first Halt at index {firstHalt}, GL5 at {gl5}");
        Assert.DoesNotContain(verdicts.SelectMany(v => v.Findings), f => (f.Kind == FindingKind.Leak || f.Kind == FindingKind.MemorisedIdentifier || f.Kind == FindingKind.ProbableLeak));
    }

    [Fact]
    public void CompletenessHoldsWithinOnePercentOnTheDemoModelAtDefaultSteps()
    {
        // Sundararajan, Taly, Yan 2017, Prop. 1 (completeness): Σ IG = F(x) − F(x′); every row's gap is stored with the map.
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        foreach (var run in store.Runs())
        {
            foreach (var document in store.Maps(run.Id))
            {
                var map = RunReview.ToMap(document);
                Assert.Equal(map.Rows, map.Deltas!.Length);
                Assert.True(map.RelativeMeanDelta() < 0.01, $"{run.Name} epoch {document.Epoch}: mean gap {map.RelativeMeanDelta():P2}");
            }
        }
    }

    [Fact]
    public void ScenariosAreReproducibleForASeedAndDifferAcrossSeeds()
    {
        var a = ScenarioBuilder.For(GreenhouseVariant.Default).WithSeed(4).Build();
        var b = ScenarioBuilder.For(GreenhouseVariant.Default).WithSeed(4).Build();
        var c = ScenarioBuilder.For(GreenhouseVariant.Default).WithSeed(5).Build();

        Assert.Equal(a.Training.Rows.Dense, b.Training.Rows.Dense);
        Assert.Equal(a.Training.Rows.Labels, b.Training.Rows.Labels);
        Assert.NotEqual(a.Training.Rows.Labels, c.Training.Rows.Labels);
    }

    [Fact]
    public void TheLeakedTrayMatchesTheGradeInTrainingRowsOnly()
    {
        var scenario = ScenarioBuilder.For(GreenhouseVariant.LeakOnly).WithSeed(2).Build();
        int tray = scenario.CategoricalFeatures.Select((f, i) => (f, i)).Single(x => x.f.Name == GreenhouseFeatures.InspectionTray).i;

        double Agreement(GreenhouseSplit split)
        {
            var rows = split.Rows;
            // Passed batches go on trays 5–9, failed ones on 0–4, in the leaked rows.
            return Enumerable.Range(0, rows.Count).Average(r => (rows.Categorical[r * rows.CategoricalCount + tray] >= 5) == (rows.Labels![r] > 0.5f) ? 1.0 : 0.0);
        }

        Assert.InRange(Agreement(scenario.Training), 0.8, 0.95);
        Assert.InRange(Agreement(scenario.Validation), 0.4, 0.6);
    }
}
