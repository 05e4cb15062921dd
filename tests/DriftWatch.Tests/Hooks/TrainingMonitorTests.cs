using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Hooks;

public sealed class TrainingMonitorTests
{
    private static ProbeSet Probe(int perHalf = 12) => TestProbes.Small(perHalf);

    private static MonitorOptions Options(string store, SmallNet model, string run = "test-run") => new()
    {
        StorePath = store,
        RunName = run,
        Schema = model.Schema,
        Probe = Probe(),
        Methods = [new IntegratedGradients(32)],
    };

    private static void TrainOneEpoch(SmallNet model, ProbeRows rows, optim.Optimizer optimizer)
    {
        using var scope = torch.NewDisposeScope();
        model.train();
        optimizer.zero_grad();
        var logits = model.call(torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]), torch.tensor(rows.Categorical, [rows.Count, 1])).squeeze(1);
        var loss = nn.functional.binary_cross_entropy_with_logits(logits, torch.tensor(rows.Labels!));
        loss.backward();
        optimizer.step();
    }

    [Fact]
    public void TheRunAMonitorHandsOutIsACopyAndItsStoreStaysItsOwn()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model));
        var before = monitor.Run;

        monitor.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));

        // The copy taken before the epoch keeps what it said; a fresh one says what the monitor learned since.
        Assert.Equal(-1, before.LastEpoch);
        Assert.Equal("", before.ModelShape);
        var after = monitor.Run;
        Assert.Equal(0, after.LastEpoch);
        Assert.StartsWith("_embedding.weight[", after.ModelShape, StringComparison.Ordinal);
        Assert.Equal((before.Id, "test-run", Path.GetFullPath(temp.File("s.litedb"))), (after.Id, after.Name, after.StorePath));
        using var reading = RunStore.OpenForReading(after.StorePath);
        Assert.Equal(after.ModelShape, reading.GetRun("test-run").ModelShape);
        // Nothing public hands out the writable store or the mutable run record.
        var exposed = typeof(TrainingMonitor).GetProperties().Select(p => p.PropertyType).ToList();
        Assert.DoesNotContain(typeof(RunStore), exposed);
        Assert.DoesNotContain(typeof(RunDocument), exposed);
    }

    [Fact]
    public void EveryEpochIsStoredWithMapsMetricsAndSnapshot()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var data = new RowsBuilder().WithRows(80).WithSeed(3).Build();
        var optimizer = new DriftWatch.Hooks.Optimizers.Adam(model.parameters(), 0.01); // TorchSharp's Adam, its scalars held (DriftWatch.Hooks)
        using (var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model)))
        {
            for (int epoch = 0; epoch < 4; epoch++)
            {
                TrainOneEpoch(model, data, optimizer);
                var verdict = monitor.EndEpoch(model, epoch, new EpochMetrics(1.0 / (epoch + 1), 0.9).With("accuracy", 0.5));
                Assert.True(verdict.Kind == VerdictKind.Continue, string.Join("; ", verdict.Reasons));
            }
        }

        using var store = RunStore.OpenForReading(temp.File("s.litedb"));
        var run = store.GetRun("test-run");
        var epochs = store.Epochs(run.Id);
        Assert.Equal([0, 1, 2, 3], epochs.Select(e => e.Epoch));
        Assert.All(epochs, e => Assert.NotNull(e.SnapshotId));
        Assert.Equal(0.25, epochs[3].Metrics[EpochMetrics.TrainLossKey]);
        Assert.Equal(0.5, epochs[3].Metrics["accuracy"]);
        var maps = store.Maps(run.Id);
        Assert.Equal(4, maps.Count);
        Assert.All(maps, m => Assert.Equal(24 * 4, FloatBytes.ToFloats(m.Scores).Length));
        Assert.All(maps, m => Assert.Equal(1.0, m.HeldOut.Share.Sum(), 6));
        Assert.Equal(Probe().Hash, run.ProbeHash);
        var statistics = store.StatisticsOf(run.Id);
        Assert.Equal(4, statistics.Count);
        Assert.All(statistics.Zip(maps), pair => Assert.Equal(pair.Second.HeldOut.Share, pair.First.Statistics!.ShareHeldOut));
        Assert.All(statistics, s => Assert.True(s.Statistics!.ShareGapWidth.All(w => w > 0)));
        Assert.Equal(4, store.Verdicts(run.Id).Count);
    }

    [Fact]
    public void StoreWrittenClosedAndReopenedReturnsIdenticalMaps()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        float[] written;
        using (var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model)))
        {
            monitor.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));
            written = FloatBytes.ToFloats(monitor.Store.Maps(monitor.Run.Id)[0].Scores);
        }

        // Recompute independently from the same weights to show the stored numbers are the attribution's own.
        using var scope = torch.NewDisposeScope();
        model.eval();
        var probe = Probe();
        var features = model.Encode(torch.tensor(probe.Rows.Dense, [probe.Count, 3]), torch.tensor(probe.Rows.Categorical, [probe.Count, 1])).detach();
        var columns = new IntegratedGradients(32).Attribute(new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(7), 8192));
        var expected = AttributionMap.FromColumns(columns, model.Schema).Scores;

        using var store = RunStore.OpenForReading(temp.File("s.litedb"));
        var read = FloatBytes.ToFloats(store.Maps(store.GetRun("test-run").Id)[0].Scores);
        Assert.Equal(written, read);
        for (int i = 0; i < expected.Length; i++)
            Assert.Equal(expected[i], read[i], 1e-6);
    }

    [Fact]
    public void SnapshotReadBackReproducesTheModelsOutputsExactly()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4, seed: 1);
        var data = new RowsBuilder().WithRows(80).WithSeed(3).Build();
        TrainOneEpoch(model, data, new DriftWatch.Hooks.Optimizers.Adam(model.parameters(), 0.05));
        string snapshotId;
        using (var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model)))
        {
            monitor.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));
            snapshotId = monitor.Store.Epochs(monitor.Run.Id)[0].SnapshotId!;
        }

        using var restored = new SmallNet(3, 5, 4, seed: 99);
        using (var store = RunStore.OpenForReading(temp.File("s.litedb")))
        using (var weights = store.ReadSnapshot(snapshotId))
            restored.load(weights);

        using var scope = torch.NewDisposeScope();
        model.eval();
        restored.eval();
        var dense = torch.tensor(data.Dense, [80, 3]);
        var cats = torch.tensor(data.Categorical, [80, 1]);
        Assert.Equal(model.call(dense, cats).data<float>().ToArray(), restored.call(dense, cats).data<float>().ToArray());
    }

    [Fact]
    public void AnExceptionInsideAttributionDoesNotEscapeAndIsRecorded()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var options = Options(temp.File("s.litedb"), model) with { Methods = [new ThrowingMethod(), new Saliency()] };
        using var monitor = new TrainingMonitor(options);

        var verdict = monitor.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));
        var next = monitor.EndEpoch(model, 1, new EpochMetrics(0.6, 0.7));

        Assert.Equal(VerdictKind.Caution, verdict.Kind);
        var failure = Assert.Single(verdict.Findings);
        Assert.Equal(FindingKind.MonitoringFailure, failure.Kind);
        Assert.Contains("boom at the probe", failure.Evidence);
        var epochs = monitor.Store.Epochs(monitor.Run.Id);
        Assert.Equal(2, epochs.Count);
        Assert.Contains(epochs[0].Problems, p => p.Contains("boom at the probe", StringComparison.Ordinal));
        Assert.Equal(2, monitor.Store.Maps(monitor.Run.Id, "saliency").Count); // the other method still ran
        Assert.Equal("Caution", monitor.Store.Verdicts(monitor.Run.Id)[0].Kind);
        Assert.Single(next.Findings);
    }

    [Fact]
    public void StrictModeRethrows()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model) with { Methods = [new ThrowingMethod()], Strict = true });

        Assert.Throws<InvalidOperationException>(() => monitor.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7)));
    }

    [Fact]
    public void NaNLossAndNaNScoresBecomeFindingsNotCrashes()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model) with { Methods = [new NaNMethod()] });

        var verdict = monitor.EndEpoch(model, 0, new EpochMetrics(double.NaN, 0.7));

        Assert.Equal(2, verdict.Findings.Count(f => f.Kind == FindingKind.NumericalTrouble));
        Assert.Contains(verdict.Reasons, r => r.Contains(MetricKeys.TrainLoss, StringComparison.Ordinal));
        Assert.Contains(verdict.Reasons, r => r.Contains("not trusted", StringComparison.Ordinal));
    }

    [Fact]
    public void OutOfOrderEpochIsRecordedNotThrown()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model));
        monitor.EndEpoch(model, 5, new EpochMetrics(0.7, 0.7));

        var verdict = monitor.EndEpoch(model, 3, new EpochMetrics(0.7, 0.7));

        Assert.Contains("epochs must increase", Assert.Single(verdict.Reasons));
        Assert.Equal([5], monitor.Store.Epochs(monitor.Run.Id).Select(e => e.Epoch));
    }

    [Fact]
    public void ResumedRunContinuesWithoutDuplicates()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using (var first = new TrainingMonitor(Options(temp.File("s.litedb"), model)))
        {
            first.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));
            first.EndEpoch(model, 1, new EpochMetrics(0.6, 0.7));
        }

        using var resumed = new TrainingMonitor(Options(temp.File("s.litedb"), model) with { Resume = true });
        Assert.Equal(1, resumed.LastEpoch);
        var repeated = resumed.EndEpoch(model, 1, new EpochMetrics(0.55, 0.7)); // a complete epoch again: refused, kept as stored
        resumed.EndEpoch(model, 2, new EpochMetrics(0.5, 0.7));

        Assert.Contains("is stored complete and is never replaced", Assert.Single(repeated.Reasons));
        Assert.Single(resumed.Store.Runs());
        Assert.Equal([0, 1, 2], resumed.Store.Epochs(resumed.Run.Id).Select(e => e.Epoch));
        Assert.Equal(0.6, resumed.Store.Epochs(resumed.Run.Id)[1].Metrics[EpochMetrics.TrainLossKey]);
        Assert.Equal(3, resumed.Store.Maps(resumed.Run.Id).Count);
    }

    [Fact]
    public void ResumingWithAnotherProbeSetIsRefusedAtConfiguration()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using (var first = new TrainingMonitor(Options(temp.File("s.litedb"), model)))
            first.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));

        var e = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(temp.File("s.litedb"), model) with { Probe = Probe(perHalf: 10), Resume = true }));

        Assert.Contains("different probe set", e.Message);
    }

    [Fact]
    public void ProbeWidthThatDoesNotMatchTheSchemaIsRefused()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var wide = new RowsBuilder().WithDense(4).Build();

        var e = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(temp.File("s.litedb"), model) with { Probe = new ProbeSet(wide, wide) }));

        Assert.Contains("4 dense", e.Message);
        Assert.False(File.Exists(temp.File("s.litedb")));
    }

    [Fact]
    public void TwoHundredEpochsLeaveNoTensorBehind()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model) with { SaveSnapshots = false, Methods = [new IntegratedGradients(4)] });
        monitor.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));
        // The count is process-wide: settle what earlier tests left to the finalizer before each reading, so only live
        // tensors are counted. A leak of one tensor per epoch would add 200.
        long before = LiveTensors();

        for (int epoch = 1; epoch <= 200; epoch++)
            monitor.EndEpoch(model, epoch, new EpochMetrics(0.7, 0.7));

        Assert.True(LiveTensors() <= before, $"live tensors grew from {before} to {LiveTensors()} over 200 epochs");
        Assert.Equal(201, monitor.Store.Epochs(monitor.Run.Id).Count);
    }

    private static long LiveTensors()
    {
        for (int i = 0; i < 2; i++)
        {
            GC.Collect();
            GC.WaitForPendingFinalizers();
        }
        return torch.Tensor.TotalCount;
    }

    private sealed class ThrowingMethod : IAttributionMethod
    {
        public string Name => "throwing";

        public ImmutableSortedDictionary<string, string> Settings => ImmutableSortedDictionary<string, string>.Empty;

        public ColumnAttribution Attribute(AttributionInput input) => throw new InvalidOperationException("boom at the probe");
    }

    private sealed class NaNMethod : IAttributionMethod
    {
        public string Name => "nan";

        public ImmutableSortedDictionary<string, string> Settings => ImmutableSortedDictionary<string, string>.Empty;

        public ColumnAttribution Attribute(AttributionInput input) =>
            new(input.Rows, input.Columns, Enumerable.Repeat(float.NaN, input.Rows * input.Columns).ToArray(), null, 0);
    }
}
