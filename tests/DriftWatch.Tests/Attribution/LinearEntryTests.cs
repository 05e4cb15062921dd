using DriftWatch.Attribution;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Hooks.Models;
using DriftWatch.Model;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Attribution;

/// <summary>Integrated Gradients along the path in a model's affine entry layer (<see cref="ILinearEntry"/>).</summary>
public sealed class LinearEntryTests
{
    private static void AssertClose(float[] expected, float[] actual)
    {
        Assert.Equal(expected.Length, actual.Length);
        double scale = expected.Max(v => Math.Abs((double)v));
        Assert.True(scale > 1e-3, "the attributions are all near zero: the comparison would say nothing");
        for (int i = 0; i < expected.Length; i++)
            Assert.True(Math.Abs(expected[i] - actual[i]) <= 1e-5 * (1 + scale), $"value {i}: {expected[i]} against {actual[i]}");
    }

    [Theory]
    [InlineData(1 << 20, false)] // every row's path in one block
    [InlineData(80, false)] // 5 rows a block, the last block short
    [InlineData(80, true)] // per-row baselines
    [InlineData(5, false)] // fewer rows a block than steps: the whole-model path, entry or not
    public void ThePathInTheEntryLayerGivesTheSameAttributionsAsThePathInFeatureSpace(int chunk, bool rowBaselines)
    {
        // Sundararajan, Taly, Yan 2017, §3: IG integrates ∂F/∂x_i along x′ + α(x − x′). An affine first layer maps that
        // straight line to the straight line between the ends' images and contributes its weight to every gradient
        // (the chain rule), so both routes give the same numbers up to float rounding.
        using var model = new TabularNet(RowsShapedModels.Settings(16, 8));
        model.eval();
        using var scope = torch.NewDisposeScope();
        var features = RowsShapedModels.Features(model, 37);
        var baseline = rowBaselines ? features.flip(0) * 0.5 : torch.zeros(features.shape[1]);
        var method = new IntegratedGradients(16);

        var whole = method.Attribute(AttributionInput.ForModel(model, AttributionTarget.Probability, features, baseline, chunk, model.Schema, splitAtEntry: false));
        var split = AttributionInput.ForModel(model, AttributionTarget.Probability, features, baseline, chunk, model.Schema);
        Assert.NotNull(split.Entry);
        var viaEntry = method.Attribute(split);

        AssertClose(whole.Scores, viaEntry.Scores);
        AssertClose(whole.OutputGaps!, viaEntry.OutputGaps!);
        Assert.Equal(whole.Evaluations, viaEntry.Evaluations);
    }

    [Fact]
    public void TheDemoModelsEntryPathKeepsCompletenessAgainstTheWholeModel()
    {
        // Sundararajan, Taly, Yan 2017, Prop. 1 (completeness): Σ_i IG_i(x) = F(x) − F(x′), with F evaluated here through
        // the demo model's whole score step, not through the split.
        var scenario = ScenarioBuilder.For(GreenhouseVariant.Clean).WithSeed(2).Build();
        torch.manual_seed(2);
        using var model = GreenhouseNet.For(scenario, dropout: 0.2); // dropout layers sit after the entry: eval mode skips them
        model.eval();
        using var scope = torch.NewDisposeScope();
        var rows = scenario.Validation.Rows;
        Tensor features;
        using (torch.no_grad())
            features = model.Encode(torch.tensor(rows.Dense, [rows.Count, rows.DenseCount])[..64], torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount])[..64]).detach();
        var input = AttributionInput.ForModel(model, AttributionTarget.Logit, features, torch.zeros(features.shape[1]), AttributionInput.DefaultChunkRows, model.Schema);
        Assert.NotNull(input.Entry);

        // 256 steps: on this untrained ReLU network 64 midpoint steps leave a quadrature gap near 1% whichever route is taken.
        var columns = new IntegratedGradients(256).Attribute(input);

        float[] wholeScores;
        using (torch.no_grad())
            wholeScores = model.Score(torch.cat([features, torch.zeros(1, features.shape[1])], 0)).squeeze(1).data<float>().ToArray();
        double gapSum = 0, deltaSum = 0;
        for (int r = 0; r < 64; r++)
        {
            double gap = wholeScores[r] - wholeScores[64];
            double sum = 0;
            for (int c = 0; c < columns.Columns; c++)
                sum += columns.Scores[r * columns.Columns + c];
            gapSum += Math.Abs(gap);
            deltaSum += Math.Abs(sum - gap);
        }
        Assert.True(gapSum > 1, "the rows' outputs barely differ from the baseline's: completeness would say nothing");
        Assert.True(deltaSum / gapSum < 0.01, $"mean gap was {deltaSum / gapSum:P2} of mean |F(x) − F(0)|");
    }

    [Fact]
    public void AModelThatIsOnlyItsEntryLayerGetsDifferenceTimesWeight()
    {
        // Sundararajan, Taly, Yan 2017, Eq. 1: for F(x) = w·x + b the path gradient is w everywhere, so IG_i = (x_i − x′_i)·w_i.
        // With no hidden layer the rest of the score step is the identity on the entry's single unit.
        using var model = new TabularNet(RowsShapedModels.Settings());
        model.eval();
        using var scope = torch.NewDisposeScope();
        var features = RowsShapedModels.Features(model, 9);
        var baseline = torch.full(features.shape[1], 0.25f);
        var columns = new IntegratedGradients(3).Attribute(AttributionInput.ForModel(model, AttributionTarget.Logit, features, baseline, 64, model.Schema));

        var w = model.EntryWeight.detach().squeeze(0).data<float>().ToArray();
        var x = features.data<float>().ToArray();
        for (int r = 0; r < 9; r++)
        {
            for (int c = 0; c < w.Length; c++)
                Assert.Equal((x[r * w.Length + c] - 0.25) * w[c], columns.Scores[r * w.Length + c], 5);
        }
    }

    [Fact]
    public void AdaptiveStepsTakeTheEntryPathToo()
    {
        using var model = new TabularNet(RowsShapedModels.Settings(16, 8));
        model.eval();
        using var scope = torch.NewDisposeScope();
        var features = RowsShapedModels.Features(model, 20);
        var baseline = torch.zeros(features.shape[1]);
        var method = new AdaptiveIntegratedGradients(initialSteps: 4, maximumSteps: 64, tolerance: 0.001);

        var whole = method.Attribute(AttributionInput.ForModel(model, AttributionTarget.Logit, features, baseline, 4096, model.Schema, splitAtEntry: false));
        var viaEntry = method.Attribute(AttributionInput.ForModel(model, AttributionTarget.Logit, features, baseline, 4096, model.Schema));

        AssertClose(whole.Scores, viaEntry.Scores);
        Assert.Equal(whole.Evaluations, viaEntry.Evaluations);
    }

    [Fact]
    public void AModelWithoutAnEntryLayerIsAttributedWhole()
    {
        using var model = new SmallNet(3, 5, 4);
        using var scope = torch.NewDisposeScope();
        var features = RowsShapedModels.Features(model, 4);
        Assert.Null(AttributionInput.ForModel(model, AttributionTarget.Logit, features, torch.zeros(7), 64, model.Schema).Entry);
    }

    [Fact]
    public void AnEntryThatDoesNotReproduceTheScoreStepIsRefusedWithTheRowAndTheFix()
    {
        using var inner = new TabularNet(RowsShapedModels.Settings(8));
        using var skewed = new DeclaredEntry(inner, shift: 0.5f);
        using var scope = torch.NewDisposeScope();
        var features = RowsShapedModels.Features(inner, 12);

        var error = Assert.Throws<DriftWatchException>(() => AttributionInput.ForModel(skewed, AttributionTarget.Logit, features, torch.zeros(7), 64, inner.Schema));
        Assert.Contains("does not reproduce its score step: row 0", error.Message, StringComparison.Ordinal);
        Assert.Contains("fix the model's ILinearEntry members", error.Message, StringComparison.Ordinal);

        using var wrongShape = new DeclaredEntry(inner, shift: 0, weight: torch.ones(8, 6));
        var shape = Assert.Throws<DriftWatchException>(() => AttributionInput.ForModel(wrongShape, AttributionTarget.Logit, features, torch.zeros(7), 64, inner.Schema));
        Assert.Contains("entry weight has shape [8, 6]; expected [units, 7]", shape.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void TheMonitorReportsABadEntryAndAttributesTheWholeModel()
    {
        using var temp = new TempFolder();
        using var inner = new TabularNet(RowsShapedModels.Settings(8));
        using var skewed = new DeclaredEntry(inner, shift: 0.5f);
        using var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = temp.File("s.litedb"),
            RunName = "skewed",
            Schema = inner.Schema,
            Probe = TestProbes.Small(),
            Methods = [new IntegratedGradients(16)],
        });

        var verdict = monitor.EndEpoch(skewed, 0, new EpochMetrics(0.7, 0.7));

        var failure = Assert.Single(verdict.Findings);
        Assert.Equal(FindingKind.MonitoringFailure, failure.Kind);
        Assert.Contains("entry layer check failed at epoch 0", failure.Evidence, StringComparison.Ordinal);
        var map = Assert.Single(monitor.Store.Maps(monitor.Run.Id, "integrated-gradients"));
        // Attributed through the whole score step: the shift of the declared rest left the stored gaps alone.
        var stored = DriftWatch.Storage.FloatBytes.ToFloats(map.OutputGaps!);
        var probe = TestProbes.Small();
        using var scope = torch.NewDisposeScope();
        var features = inner.Encode(torch.tensor(probe.Rows.Dense, [probe.Count, 3]), torch.tensor(probe.Rows.Categorical, [probe.Count, 1])).detach();
        var gaps = Gradients.ToArray(inner.Score(features).squeeze(1) - inner.Score(torch.zeros(1, 7)).squeeze(1));
        AssertClose(gaps, stored);
    }

    [Fact]
    public void ReattributeReportsABadEntryAndAttributesTheWholeModelAsTheMonitorDoes()
    {
        using var temp = new TempFolder();
        string path = temp.File("s.litedb");
        using var inner = new TabularNet(RowsShapedModels.Settings(8));
        using var skewed = new DeclaredEntry(inner, shift: 0.5f);
        byte[] monitored;
        using (var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = path,
            RunName = "skewed",
            Schema = inner.Schema,
            Probe = TestProbes.Small(),
            Methods = [new IntegratedGradients(16)],
        }))
        {
            monitor.EndEpoch(skewed, 0, new EpochMetrics(0.7, 0.7));
            monitored = Assert.Single(monitor.Store.Maps(monitor.Run.Id, "integrated-gradients")).Scores;
        }
        using var rebuilt = new TabularNet(RowsShapedModels.Settings(8));
        using var rebuiltSkewed = new DeclaredEntry(rebuilt, shift: 0.5f);
        using var store = DriftWatch.Storage.RunStore.OpenForWriting(path);
        var run = store.GetRun("skewed");

        var result = Assert.Single(Reattribution.Run(store, run, rebuiltSkewed, new ReattributionOptions { Method = new IntegratedGradients(16) }));

        Assert.Equal(ReattributionOutcome.Stored, result.Outcome);
        var problem = Assert.Single(result.Problems);
        Assert.StartsWith("the entry layer check failed at epoch 0: DriftWatchException: ", problem, StringComparison.Ordinal);
        Assert.Contains("does not reproduce its score step", problem, StringComparison.Ordinal);
        // The whole score step was attributed, as the monitor did with the same weights: the same map to the bit.
        var map = Assert.Single(store.Maps(run.Id, "re-integrated-gradients"));
        Assert.Equal(monitored, map.Scores);
    }

    [Fact]
    public void ALayerChainMustOpenWithALinearLayer()
    {
        var error = Assert.Throws<ArgumentException>(() => new LayerChain([nn.ReLU(), nn.Linear(3, 1)]));
        Assert.StartsWith("the first layer of the chain must be a linear layer; got ReLU", error.Message, StringComparison.Ordinal);
        Assert.Throws<ArgumentException>(() => new LayerChain([]));
    }

    [Fact]
    public void DeclaringTheEntryLayerKeepsTheWeightNamesSnapshotsUse()
    {
        // Stored snapshots are state dictionaries: the entry split must not register the layers a second time.
        var scenario = ScenarioBuilder.For(GreenhouseVariant.Clean).WithSeed(1).Build();
        using var demo = GreenhouseNet.For(scenario, dropout: 0.1);
        Assert.Equal(
            ["_embeddings.0.weight", "_embeddings.1.weight", "_embeddings.2.weight", "_embeddings.3.weight", "_embeddings.4.weight",
             "_scorer.0.weight", "_scorer.0.bias", "_scorer.3.weight", "_scorer.3.bias", "_scorer.6.weight", "_scorer.6.bias"],
            demo.state_dict().Keys.ToArray());
        using var tabular = new TabularNet(RowsShapedModels.Settings(16, 8));
        Assert.Equal(
            ["_embeddings.0.weight", "_scorer.0.weight", "_scorer.0.bias", "_scorer.2.weight", "_scorer.2.bias", "_scorer.4.weight", "_scorer.4.bias"],
            tabular.state_dict().Keys.ToArray());
    }

    // A model that declares its inner model's entry layer, with a rest shifted by a constant or a weight of its own.
    private sealed class DeclaredEntry(TabularNet inner, float shift, Tensor? weight = null) : IWatchedModel, ILinearEntry, IDisposable
    {
        public FeatureSchema Schema => inner.Schema;

        public nn.Module Module => inner;

        public Tensor EntryWeight => weight ?? inner.EntryWeight;

        public Tensor? EntryBias => weight is null ? inner.EntryBias : null;

        public Tensor Encode(Tensor dense, Tensor categorical) => inner.Encode(dense, categorical);

        public Tensor Score(Tensor features) => inner.Score(features);

        public Tensor ScoreAfterEntry(Tensor entry) => inner.ScoreAfterEntry(entry).add(torch.tensor(shift));

        public void Dispose() => weight?.Dispose();
    }
}
