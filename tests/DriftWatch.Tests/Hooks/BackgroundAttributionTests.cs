using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Hooks;

public sealed class BackgroundAttributionTests
{
    private static ProbeSet Probe() => TestProbes.Small();

    private static MonitorOptions Options(string store, SmallNet model, bool background) => new()
    {
        StorePath = store,
        RunName = "run",
        Schema = model.Schema,
        Probe = Probe(),
        Methods = [new IntegratedGradients(32), new FeatureAblation()],
        Model = ModelRecipe.For<SmallNetFactory>([]),
        BackgroundAttribution = background,
    };

    [Fact]
    public void BackgroundAttributionStoresTheSameMapsAsSynchronousAttributionOfTheEpochsWeights()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var data = new RowsBuilder().WithRows(80).WithSeed(3).Build();
        var optimizer = optim.Adam(model.parameters(), 0.05);
        var inline = new List<Verdict>();
        var late = new List<Verdict>();
        using (var synchronous = new TrainingMonitor(Options(temp.File("sync.litedb"), model, background: false)))
        using (var background = new TrainingMonitor(Options(temp.File("background.litedb"), model, background: true)))
        {
            for (int epoch = 0; epoch < 4; epoch++)
            {
                Train(model, data, optimizer);
                var metrics = new EpochMetrics(1.0 / (epoch + 1), 0.8);
                inline.Add(synchronous.EndEpoch(model, epoch, metrics));
                late.Add(background.EndEpoch(model, epoch, metrics));
                // The next epoch trains at once, while the background copy may still be attributing: the weights it
                // attributes must be the ones EndEpoch saw.
            }
            late.Add(background.WaitForPendingEpoch());
        }

        // The background verdicts arrive one epoch late and are the synchronous ones.
        Assert.Equal([-1, 0, 1, 2, 3], late.Select(v => v.Epoch));
        Assert.Equal(inline.Select(v => (v.Epoch, v.Kind)), late.Skip(1).Select(v => (v.Epoch, v.Kind)));
        Assert.DoesNotContain(late.SelectMany(v => v.Findings), f => f.Kind == FindingKind.MonitoringFailure);

        using var syncStore = RunStore.OpenForReading(temp.File("sync.litedb"));
        using var backgroundStore = RunStore.OpenForReading(temp.File("background.litedb"));
        var expected = syncStore.Maps(syncStore.GetRun("run").Id);
        var actual = backgroundStore.Maps(backgroundStore.GetRun("run").Id);
        Assert.Equal(8, expected.Count);
        Assert.Equal(expected.Select(m => (m.Epoch, m.Method)), actual.Select(m => (m.Epoch, m.Method)));
        foreach (var (want, got) in expected.Zip(actual))
        {
            var a = FloatBytes.ToFloats(want.Scores);
            var b = FloatBytes.ToFloats(got.Scores);
            Assert.Equal(a.Length, b.Length);
            for (int i = 0; i < a.Length; i++)
                Assert.True(Math.Abs(a[i] - b[i]) <= 1e-6, $"epoch {want.Epoch} {want.Method} score {i}: {a[i]} synchronous, {b[i]} background");
        }
        // The maps differ from epoch to epoch, so equality above is not four copies of one map.
        Assert.NotEqual(FloatBytes.ToFloats(expected[0].Scores), FloatBytes.ToFloats(expected[6].Scores));
        Assert.All(backgroundStore.Epochs(backgroundStore.GetRun("run").Id), e => Assert.NotNull(e.SnapshotId));
    }

    [Fact]
    public void DisposeWaitsForThePendingEpoch()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using (var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model, background: true)))
            monitor.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));

        using var store = RunStore.OpenForReading(temp.File("s.litedb"));
        var run = store.GetRun("run");
        Assert.Equal([0], store.Epochs(run.Id).Select(e => e.Epoch));
        Assert.Equal(2, store.Maps(run.Id).Count);
    }

    [Fact]
    public void BackgroundAttributionWithoutAModelRecipeIsRefused()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var error = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(temp.File("s.litedb"), model, background: true) with { Model = null }));
        Assert.Contains("BackgroundAttribution needs Model", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void AFailureInTheBackgroundBecomesAFindingOfThatEpoch()
    {
        using var temp = new TempFolder();
        using var model = new FunctionModel(3, f => f.sum(dim: 1));
        using (var monitor = new TrainingMonitor(FunctionOptions(temp.File("s.litedb"), model, strict: false)))
        {
            Assert.Equal(-1, monitor.EndEpoch(model, 0, new EpochMetrics(0.5, 0.5)).Epoch);
            var verdict = monitor.WaitForPendingEpoch();
            Assert.Equal(0, verdict.Epoch);
            Assert.Contains(verdict.Findings, f => f.Kind == FindingKind.MonitoringFailure && f.Evidence.Contains("score step fails", StringComparison.Ordinal));
        }
        using var store = RunStore.OpenForReading(temp.File("s.litedb"));
        Assert.Single(store.Epochs(store.GetRun("run").Id)); // the epoch is kept, with its problem, without a map
    }

    [Fact]
    public void StrictModeRethrowsABackgroundFailureOnTheTrainingThread()
    {
        using var temp = new TempFolder();
        using var model = new FunctionModel(3, f => f.sum(dim: 1));
        using var monitor = new TrainingMonitor(FunctionOptions(temp.File("s.litedb"), model, strict: true));
        monitor.EndEpoch(model, 0, new EpochMetrics(0.5, 0.5));
        var error = Assert.Throws<InvalidOperationException>(() => monitor.WaitForPendingEpoch());
        Assert.Equal("score step fails", error.Message);
    }

    private static MonitorOptions FunctionOptions(string store, FunctionModel model, bool strict)
    {
        var random = new Random(5);
        ProbeRows Rows() => new([.. Enumerable.Range(0, 30).Select(_ => (float)random.NextDouble())], 3, [], 0, [.. Enumerable.Range(0, 10).Select(i => (float)(i % 2))]);
        return new MonitorOptions
        {
            StorePath = store,
            RunName = "run",
            Schema = model.Schema,
            Probe = ProbeSet.Select(Rows(), Rows(), 4, seed: 1),
            Methods = [new IntegratedGradients(8)],
            Model = ModelRecipe.For<FailingScoreFactory>([]),
            BackgroundAttribution = true,
            Strict = strict,
        };
    }

    private static void Train(SmallNet model, ProbeRows rows, optim.Optimizer optimizer)
    {
        using var scope = torch.NewDisposeScope();
        model.train();
        optimizer.zero_grad();
        var logits = model.call(torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]), torch.tensor(rows.Categorical, [rows.Count, 1])).squeeze(1);
        nn.functional.binary_cross_entropy_with_logits(logits, torch.tensor(rows.Labels!)).backward();
        optimizer.step();
    }
}

/// <summary>Builds a three-input model without weights whose score step always fails, as a broken copy of the model would.</summary>
public sealed class FailingScoreFactory : IModelFactory
{
    public IWatchedModel Create(IReadOnlyDictionary<string, string> settings) =>
        new FunctionModel(3, _ => throw new InvalidOperationException("score step fails"));
}
