using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Hooks;
using DriftWatch.Hooks.Models;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;

namespace DriftWatch.Tests.Attribution;

/// <summary>The one per-epoch attribution path (<see cref="EpochAttribution"/>) that the monitor and reattribute share.</summary>
public sealed class EpochAttributionTests
{
    [Fact]
    public void ReattributingAMonitoredRunGivesItsMapsAndQualityFiguresToTheBit()
    {
        using var temp = new TempFolder();
        string path = temp.File("s.litedb");
        using var model = new TabularNet(RowsShapedModels.Settings(8));
        var quality = new QualityOptions { SampleRows = 8, InfidelityPerturbations = 8, SensitivityPerturbations = 4 };
        var methods = ImmutableArray.Create<IAttributionMethod>(new IntegratedGradients(16), new Saliency());
        using (var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = path,
            RunName = "twice",
            Schema = model.Schema,
            Probe = TestProbes.Small(),
            Methods = methods,
            Quality = quality,
        }))
        {
            for (int epoch = 0; epoch < 2; epoch++)
            {
                monitor.EndEpoch(model, epoch, new EpochMetrics(0.7, 0.7));
                using (torch.no_grad())
                {
                    foreach (var p in model.parameters())
                        p.mul_(1.25f); // other weights for the next epoch's snapshot
                }
            }
        }
        using var store = RunStore.OpenForWriting(path);
        var run = store.GetRun("twice");
        using var rebuilt = new TabularNet(RowsShapedModels.Settings(8));

        foreach (var method in methods)
        {
            var results = Reattribution.Run(store, run, rebuilt, new ReattributionOptions { Method = method, Quality = quality });
            Assert.All(results, r => Assert.Equal(ReattributionOutcome.Stored, r.Outcome));
            Assert.All(results, r => Assert.Empty(r.Problems));
            var monitored = store.Maps(run.Id, method.Name);
            var again = store.Maps(run.Id, Reattribution.DefaultStoredName(method.Name));
            Assert.Equal([0, 1], monitored.Select(m => m.Epoch));
            Assert.Equal([0, 1], again.Select(m => m.Epoch));
            Assert.NotEqual(monitored[0].Scores, monitored[1].Scores); // the epochs' weights differ, so the check is not vacuous
            for (int i = 0; i < monitored.Count; i++)
            {
                Assert.Equal(monitored[i].Scores, again[i].Scores);
                Assert.Equal(monitored[i].Deltas, again[i].Deltas);
                Assert.Equal(monitored[i].OutputGaps, again[i].OutputGaps);
                Assert.Equal(monitored[i].HeldOut, again[i].HeldOut, ImportanceComparer.Instance);
                Assert.Equal(monitored[i].Training, again[i].Training, ImportanceComparer.Instance);
                Assert.Equal(monitored[i].Evaluations, again[i].Evaluations);
                Assert.Equal(monitored[i].Settings, again[i].Settings);
            }
            var monitoredQuality = store.Quality(run.Id, method.Name);
            var againQuality = store.Quality(run.Id, Reattribution.DefaultStoredName(method.Name));
            Assert.Equal(2, monitoredQuality.Count);
            Assert.Equal(2, againQuality.Count);
            for (int i = 0; i < monitoredQuality.Count; i++)
            {
                Assert.True(monitoredQuality[i].Measured);
                Assert.True(againQuality[i].Measured);
                Assert.Equal(monitoredQuality[i].Infidelity, againQuality[i].Infidelity);
                Assert.Equal(monitoredQuality[i].RelativeInfidelity, againQuality[i].RelativeInfidelity);
                Assert.Equal(monitoredQuality[i].MaxSensitivity, againQuality[i].MaxSensitivity);
                Assert.Equal(monitoredQuality[i].RelativeMaxSensitivity, againQuality[i].RelativeMaxSensitivity);
                Assert.Equal(monitoredQuality[i].QualityRows, againQuality[i].QualityRows);
                Assert.Equal(monitoredQuality[i].QualityEvaluations, againQuality[i].QualityEvaluations);
                Assert.Equal(monitoredQuality[i].QualitySettings, againQuality[i].QualitySettings);
                // The same map as its original: rank agreement 1.
                Assert.Equal(1.0, Assert.Single(againQuality[i].Agreement, a => a.Method == method.Name).Spearman, 12);
            }
        }
    }

    [Fact]
    public void AnEncodeStepOfTheWrongShapeIsRefusedWithTheShapeTheSchemaWants()
    {
        using var model = new TabularNet(RowsShapedModels.Settings(8));
        var attribution = new EpochAttribution
        {
            Probe = TestProbes.Small(),
            Schema = DriftWatch.Model.FeatureSchema.CreateBuilder().AddDense("dense 1").AddDense("dense 2").AddCategorical("colour", 4).Build(),
            Methods = [new Saliency()],
        };

        var error = Assert.Throws<DriftWatchException>(() => attribution.Attribute(model, 1, 0));

        Assert.Equal("encode returned shape [24, 7]; expected [24, 6] as the schema says", error.Message);
    }

    private sealed class ImportanceComparer : IEqualityComparer<ImportanceDocument>
    {
        public static readonly ImportanceComparer Instance = new();

        public bool Equals(ImportanceDocument? x, ImportanceDocument? y) =>
            x is not null && y is not null
            && x.MeanAbsolute.SequenceEqual(y.MeanAbsolute)
            && x.MeanSigned.SequenceEqual(y.MeanSigned)
            && x.Share.SequenceEqual(y.Share)
            && (x.Alignment ?? []).SequenceEqual(y.Alignment ?? []);

        public int GetHashCode(ImportanceDocument obj) => obj.MeanAbsolute.Length;
    }
}
