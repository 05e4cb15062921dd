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
    public void TheDefaultDemoTrainsOnPastTheHaltNamesAnEvidenceChartAndARerunStartsANewRunBesideTheOld()
    {
        using var temp = new TempFolder();
        string storePath = temp.File("story.litedb");
        // Small settings keep it quick; the schedule is trained whole, the gate only advising.
        var options = DemoOptions.Parse(["--small", "--epochs", "12", "--rows", "200", "--steps", "8", "--store", storePath]);
        var output = new StringWriter();

        Assert.Equal(0, GreenhouseTraining.Run(options, output));

        string text = output.ToString();
        var lines = text.Split('\n');
        using (var store = RunStore.OpenForReading(storePath))
        {
            var run = store.GetRun(options.RunName);
            Assert.True(store.Epochs(run.Id).Count >= 12, $"the run has {store.Epochs(run.Id).Count} epochs");
            int firstHalt = store.Verdicts(run.Id).Where(v => v.Kind == nameof(VerdictKind.Halt)).Select(v => v.Epoch).DefaultIfEmpty(-1).Min();
            // The planted tray leak (demo/README.md, ground truth) halts the gate; the output says where it would have stopped.
            Assert.True(firstHalt > 0, text);
            Assert.Contains($"gate      first Halt at epoch {firstHalt}: stopping on Halt would have ended the run there", text, StringComparison.Ordinal);
        }
        string evidence = lines.Single(l => l.StartsWith("evidence  ", StringComparison.Ordinal))["evidence  ".Length..];
        string path = evidence[..evidence.IndexOf(" (", StringComparison.Ordinal)];
        Assert.Contains("-evidence-", Path.GetFileName(path), StringComparison.Ordinal);
        DriftWatch.Tests.Charts.PngAssert.IsChart(path, 1200, 700);
        Assert.True(Array.FindIndex(lines, l => l.StartsWith("evidence  ", StringComparison.Ordinal)) < Array.FindIndex(lines, l => l.StartsWith("chart     ", StringComparison.Ordinal)));

        // The same command again (one epoch here, to stay quick): a new run beside the old one, said in the output.
        var again = DemoOptions.Parse(["--small", "--epochs", "1", "--rows", "200", "--steps", "8", "--store", storePath]);
        var second = new StringWriter();
        Assert.Equal(0, GreenhouseTraining.Run(again, second));
        Assert.Contains($"this is a new run beside it, '{options.RunName}-2'", second.ToString(), StringComparison.Ordinal);
        using (var store = RunStore.OpenForReading(storePath))
        {
            Assert.True(store.Epochs(store.GetRun(options.RunName).Id).Count >= 12);
            Assert.Single(store.Epochs(store.GetRun(options.RunName + "-2").Id));
        }
    }

    [Fact]
    public void StopAtHaltIsOneFlagAwayAndAGivenRunNameIsKeptAsGiven()
    {
        Assert.True(DemoOptions.Parse([]).KeepTraining);
        Assert.False(DemoOptions.Parse(["--stop-at-halt"]).KeepTraining);
        Assert.True(DemoOptions.Parse(["--stop-at-halt", "--keep-training"]).KeepTraining);
        Assert.True(DemoOptions.Parse(["--run", "x"]).RunNamed);
        Assert.False(DemoOptions.Parse([]).RunNamed);
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
