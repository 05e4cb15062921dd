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

public sealed class SeveralMethodsTests
{
    private static ProbeSet Probe() => TestProbes.Small();

    [Fact]
    public void EachEpochStoresEveryMethodsMapWithItsSettingsAgreementAndQuality()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var data = new RowsBuilder().WithRows(80).WithSeed(3).Build();
        var optimizer = new DriftWatch.Hooks.Optimizers.Adam(model.parameters(), 0.01); // TorchSharp's Adam, its scalars held (DriftWatch.Hooks)
        IAttributionMethod[] methods = [new IntegratedGradients(16), new FeatureAblation(), new ShapleySampling(8), new SmoothGrad(samples: 6)];
        var options = new MonitorOptions
        {
            StorePath = temp.File("s.litedb"),
            RunName = "several",
            Schema = model.Schema,
            Probe = Probe(),
            Methods = [.. methods],
            Quality = new QualityOptions { SampleRows = 8, InfidelityPerturbations = 16, SensitivityPerturbations = 2 },
            Model = ModelRecipe.For<SmallNetFactory>([]),
        };
        using (var monitor = new TrainingMonitor(options))
        {
            for (int epoch = 0; epoch < 2; epoch++)
            {
                Train(model, data, optimizer);
                var verdict = monitor.EndEpoch(model, epoch, new EpochMetrics(0.5, 0.6));
                Assert.DoesNotContain(verdict.Findings, f => f.Kind == FindingKind.MonitoringFailure);
            }
        }

        using var store = RunStore.OpenForReading(temp.File("s.litedb"));
        var run = store.GetRun("several");
        Assert.Equal(typeof(SmallNetFactory).FullName + ", DriftWatch.Tests", run.ModelFactory);
        var maps = store.Maps(run.Id);
        Assert.Equal(2 * methods.Length, maps.Count);
        Assert.All(maps, m => Assert.Equal(methods.Single(x => x.Name == m.Method).Settings, m.Settings));
        // The aggregates-only read gives the same maps in the same order, without their per-row arrays.
        var aggregates = store.MapAggregates(run.Id);
        Assert.Equal(maps.Select(m => (m.Epoch, m.Method)), aggregates.Select(m => (m.Epoch, m.Method)));
        for (int i = 0; i < maps.Count; i++)
        {
            Assert.NotEmpty(maps[i].Scores);
            Assert.Empty(aggregates[i].Scores);
            Assert.Null(aggregates[i].Deltas);
            Assert.Null(aggregates[i].OutputGaps);
            Assert.Equal(maps[i].HeldOut.Share, aggregates[i].HeldOut.Share);
            Assert.Equal(maps[i].Training.MeanAbsolute, aggregates[i].Training.MeanAbsolute);
            Assert.Equal(maps[i].Settings, aggregates[i].Settings);
        }
        Assert.All(store.MapAggregates(run.Id, methods[0].Name), m => Assert.Equal(methods[0].Name, m.Method));
        Assert.Equal(2, store.MapAggregates(run.Id, methods[0].Name).Count);
        var quality = store.Quality(run.Id);
        Assert.Equal(2 * methods.Length, quality.Count);
        foreach (var q in quality)
        {
            Assert.Equal(methods.Length - 1, q.Agreement.Count);
            Assert.DoesNotContain(q.Agreement, a => a.Method == q.Method);
            Assert.True(q.Measured);
            Assert.Equal(8, q.QualityRows);
            Assert.True(double.IsFinite(q.RelativeInfidelity) && q.RelativeInfidelity >= 0, $"{q.Method}: relative infidelity {q.RelativeInfidelity}");
            Assert.True(double.IsFinite(q.MaxSensitivity), $"{q.Method}: max-sensitivity {q.MaxSensitivity}");
        }

        // Agreement is symmetric and matches the stored held-out importance.
        var epochOne = quality.Where(q => q.Epoch == 1).ToDictionary(q => q.Method);
        double rho = epochOne["integrated-gradients"].Agreement.Single(a => a.Method == "shapley-sampling").Spearman;
        Assert.Equal(rho, epochOne["shapley-sampling"].Agreement.Single(a => a.Method == "integrated-gradients").Spearman, 12);
        var ig = maps.Single(m => m.Epoch == 1 && m.Method == "integrated-gradients");
        var shapley = maps.Single(m => m.Epoch == 1 && m.Method == "shapley-sampling");
        Assert.Equal(MethodAgreement.Spearman(ig.HeldOut.MeanAbsolute, shapley.HeldOut.MeanAbsolute), rho, 12);
    }

    [Fact]
    public void ARecipeWhoseModelHasAnotherSchemaIsRefusedBeforeTraining()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var options = new MonitorOptions
        {
            StorePath = temp.File("s.litedb"),
            RunName = "bad-recipe",
            Schema = model.Schema,
            Probe = Probe(),
            Model = ModelRecipe.For<SmallNetFactory>([new("width", "6")]),
        };

        var error = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(options));
        Assert.Contains("another feature schema", error.Message);
        Assert.False(File.Exists(temp.File("s.litedb")));
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

/// <summary>Rebuilds the tests' <see cref="SmallNet"/> (3 dense, 5 levels, embedding width from the settings, default 4).</summary>
public sealed class SmallNetFactory : IModelFactory
{
    public IWatchedModel Create(IReadOnlyDictionary<string, string> settings)
    {
        int width = settings.TryGetValue("width", out var text) ? int.Parse(text, System.Globalization.CultureInfo.InvariantCulture) : 4;
        return new SmallNet(3, 5, width);
    }
}
