using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Cli;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using Xunit.Abstractions;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Faults inside monitoring — a method that runs out of memory or returns infinities, a snapshot that cannot be taken, a
/// store whose file system turns read-only or fills up — never reach the training loop (unless Strict), become a
/// finding, leave no half epoch, and the next epoch works.
/// </summary>
public sealed class MonitoringFaultTests
{
    private readonly ITestOutputHelper _output;

    public MonitoringFaultTests(ITestOutputHelper output) => _output = output;

    private static ProbeSet Probe() => TestProbes.Small();

    private static MonitorOptions Options(string store, IWatchedModel model, params IAttributionMethod[] methods) => new()
    {
        StorePath = store,
        RunName = "faults",
        Schema = model.Schema,
        Probe = Probe(),
        Methods = methods.Length == 0 ? [new IntegratedGradients(16)] : [.. methods],
    };

    private static EpochMetrics Metrics(int epoch) => new(0.7 - (0.01 * epoch), 0.7);

    [Fact]
    public void AMethodRunningOutOfMemoryIsAFindingAndTheNextEpochIsWhole()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var method = new FaultyMethod(new IntegratedGradients(16)) { FailAt = [0], Fault = Fault.OutOfMemory };
        using var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model, method));

        var failed = monitor.EndEpoch(model, 0, Metrics(0));
        var next = monitor.EndEpoch(model, 1, Metrics(1));

        var failure = Assert.Single(failed.Findings);
        Assert.Equal(FindingKind.MonitoringFailure, failure.Kind);
        Assert.Contains("OutOfMemoryException", failure.Evidence);
        Assert.Equal(VerdictKind.Continue, next.Kind);
        var epochs = monitor.Store.Epochs(monitor.Run.Id);
        Assert.Equal([0, 1], epochs.Select(e => e.Epoch));
        Assert.Contains(epochs[0].Problems, p => p.Contains("OutOfMemoryException", StringComparison.Ordinal));
        Assert.NotNull(epochs[0].SnapshotId); // the snapshot and metrics were still kept
        Assert.Equal([1], monitor.Store.Maps(monitor.Run.Id).Select(m => m.Epoch));
        Finalizers.RunNow();
    }

    [Fact]
    public void InfiniteScoresAreAFindingAndEveryReadCommandStillWorks()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var method = new FaultyMethod(new IntegratedGradients(16)) { FailAt = [1], Fault = Fault.Infinite };
        string store = temp.File("s.litedb");
        using (var monitor = new TrainingMonitor(Options(store, model, method)))
        {
            for (int epoch = 0; epoch < 3; epoch++)
            {
                var verdict = monitor.EndEpoch(model, epoch, Metrics(epoch) with { ValidationLoss = epoch == 1 ? double.PositiveInfinity : 0.7 });
                if (epoch == 1)
                {
                    Assert.Equal(2, verdict.Findings.Count(f => f.Kind == FindingKind.NumericalTrouble));
                    Assert.Contains(verdict.Reasons, r => r.Contains("NaN or infinite", StringComparison.Ordinal));
                }
                else
                {
                    Assert.DoesNotContain(verdict.Findings, f => (f.Kind == FindingKind.NumericalTrouble || f.Kind == FindingKind.MonitoringFailure));
                }
            }
        }

        // The morning after: a stored infinity must not break a table, a chart or the gate.
        foreach (string[] args in new[]
        {
            new[] { "runs", "--store", store },
            ["show", "faults", "--store", store],
            ["check", "faults", "--store", store, "--json"],
            ["check", "faults", "--store", store, "--policy", WritePolicy(temp)],
            ["chart", "faults", "--store", store, "--out", temp.File("charts")],
        })
        {
            var error = new StringWriter();
            int code = CliApp.Run(args, new StringWriter(), error);
            Assert.True(code is ExitCodes.Fine or ExitCodes.Halt, $"{string.Join(' ', args)} exited {code}: {error}");
        }
        // Without --kind: the evidence chart of the run's most severe finding (its numerical trouble), then the trend chart.
        var pngs = Directory.GetFiles(temp.File("charts"), "*.png").Select(Path.GetFileName).ToList();
        Assert.Equal(2, pngs.Count);
        Assert.Contains(pngs, p => p!.Contains("-evidence-", StringComparison.Ordinal));
        Finalizers.RunNow();
    }

    [Fact]
    public void AMethodReturningTheWrongShapeIsAFindingAndTheOtherMethodStillRuns()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var method = new FaultyMethod(new IntegratedGradients(16)) { FailAt = [0], Fault = Fault.WrongShape };
        using var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model, method, new Saliency()));

        var verdict = monitor.EndEpoch(model, 0, Metrics(0));
        var next = monitor.EndEpoch(model, 1, Metrics(1));

        Assert.Contains("feature-space columns", Assert.Single(verdict.Findings).Evidence);
        Assert.Equal([0, 1], monitor.Store.Maps(monitor.Run.Id, "saliency").Select(m => m.Epoch));
        Assert.Equal([1], monitor.Store.Maps(monitor.Run.Id, method.Name).Select(m => m.Epoch));
        Assert.Equal(VerdictKind.Continue, next.Kind);
        Finalizers.RunNow();
    }

    [Fact]
    public void ASnapshotThatCannotBeTakenIsAFindingAndTheRunCannotBeResumedFromThatEpoch()
    {
        using var temp = new TempFolder();
        using var model = new SnapshotFailingNet();
        using var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model));

        monitor.EndEpoch(model, 0, Metrics(0));
        model.FailSnapshots = true;
        var failed = monitor.EndEpoch(model, 1, Metrics(1));

        Assert.Contains("snapshot failed at epoch 1", Assert.Single(failed.Findings).Evidence);
        var epochs = monitor.Store.Epochs(monitor.Run.Id);
        Assert.Equal([0, 1], epochs.Select(e => e.Epoch));
        Assert.Null(epochs[1].SnapshotId);
        Assert.Equal(2, monitor.Store.Maps(monitor.Run.Id).Count); // the maps were still stored
        var refused = Assert.Throws<DriftWatchException>(() => monitor.RestoreLastSnapshot(model));
        Assert.Contains("has no weight snapshot", refused.Message);

        model.FailSnapshots = false;
        Assert.Equal(VerdictKind.Continue, monitor.EndEpoch(model, 2, Metrics(2)).Kind);
        Assert.Equal(2, monitor.RestoreLastSnapshot(model));
        Finalizers.RunNow();
    }

    [MountFact]
    public void AStoreTurningReadOnlyMidRunNeverThrowsLeavesNoHalfEpochAndRecovers()
    {
        using var disk = ScratchFileSystem.MountForTest(8 << 20, _output);
        if (disk is null)
            return;
        using var model = new SmallNet(3, 5, 4);
        string store = disk.File("s.litedb");
        using var monitor = new TrainingMonitor(Options(store, model));
        monitor.EndEpoch(model, 0, Metrics(0));

        disk.SetReadOnly(true);
        Verdict failed;
        try
        {
            // On a thread that then ends, so anything the failed write left for a finalizer meets it below.
            failed = Finalizers.OnAThreadThatEnds(() => monitor.EndEpoch(model, 1, Metrics(1)));
            Finalizers.RunNow();
            // A store on a read-only disk is still read: the CLI never needs to write.
            using var whileReadOnly = RunStore.OpenForReading(store);
            Assert.Equal([0], whileReadOnly.Epochs(whileReadOnly.GetRun("faults").Id).Select(e => e.Epoch));
        }
        finally
        {
            disk.SetReadOnly(false);
        }
        var next = monitor.EndEpoch(model, 2, Metrics(2));

        Assert.Contains(failed.Findings, f => f.Kind == FindingKind.MonitoringFailure && f.Evidence.Contains("Read-only file system", StringComparison.Ordinal));
        Assert.DoesNotContain(next.Findings, f => f.Kind == FindingKind.MonitoringFailure);
        using var reader = RunStore.OpenForReading(store);
        var run = reader.GetRun("faults");
        Assert.Equal([0, 2], reader.Epochs(run.Id).Select(e => e.Epoch));
        Assert.Equal([0, 2], reader.Maps(run.Id).Select(m => m.Epoch));
        Assert.Equal(0, RawCount(reader, "maps", run.Id, 1)); // nothing of epoch 1 was written, not even hidden
        _output.WriteLine($"read-only store, epoch 1: {string.Join(" | ", failed.Reasons)}");
        monitor.Dispose(); // whatever LiteDB left behind after the failure becomes garbage here
        Finalizers.RunNow();
    }

    [MountFact]
    public void StrictModeTurnsAnUnwritableStoreIntoAStoreException()
    {
        using var disk = ScratchFileSystem.MountForTest(8 << 20, _output);
        if (disk is null)
            return;
        using var model = new SmallNet(3, 5, 4);
        using var monitor = new TrainingMonitor(Options(disk.File("s.litedb"), model) with { Strict = true });
        monitor.EndEpoch(model, 0, Metrics(0));

        disk.SetReadOnly(true);
        try
        {
            var e = Assert.Throws<StoreException>(() => Finalizers.OnAThreadThatEnds(() => monitor.EndEpoch(model, 1, Metrics(1))));
            Assert.Contains("could not be read or written", e.Message);
            Finalizers.RunNow();
        }
        finally
        {
            disk.SetReadOnly(false);
        }
        monitor.Dispose();
        Finalizers.RunNow();
    }

    [MountFact]
    public void AFullDiskMidRunNeverThrowsKeepsEveryCompleteEpochAndTheNextEpochWorks()
    {
        using var disk = ScratchFileSystem.MountForTest(6 << 20, _output);
        if (disk is null)
            return;
        // A wide model, so its snapshot (~1 MB) is the write that finds the disk full.
        using var model = new SmallNet(3, 5, 4, hidden: 500);
        string store = disk.File("s.litedb");
        using var monitor = new TrainingMonitor(Options(store, model));
        monitor.EndEpoch(model, 0, Metrics(0));

        string filler = disk.Fill(leave: 256 << 10);
        int clearedBefore = OrphanedTransactions.Cleared;
        // On a thread that then ends: LiteDB roots a thread's transaction until the thread ends, and the transaction
        // a refused log write leaves would throw from its finalizer then (before OrphanedTransactions).
        var failed = Finalizers.OnAThreadThatEnds(() => monitor.EndEpoch(model, 1, Metrics(1)));
        Finalizers.RunNow();
        Assert.True(OrphanedTransactions.Cleared > clearedBefore, "the refused write left no LiteDB transaction to clear; the test no longer reaches the failure it guards against");
        File.Delete(filler);
        var next = monitor.EndEpoch(model, 2, Metrics(2));

        Assert.Contains(failed.Findings, f => f.Kind == FindingKind.MonitoringFailure && f.Evidence.Contains("No space left on device", StringComparison.Ordinal));
        Assert.DoesNotContain(next.Findings, f => f.Kind == FindingKind.MonitoringFailure);
        using var reader = RunStore.OpenForReading(store);
        var run = reader.GetRun("faults");
        var epochs = reader.Epochs(run.Id);
        // Epoch 1 is either absent or stored with its problems named; epochs 0 and 2 are whole.
        var numbers = epochs.Select(e => e.Epoch).ToList();
        Assert.True(numbers.SequenceEqual([0, 2]) || numbers.SequenceEqual([0, 1, 2]), string.Join(",", numbers));
        Assert.All(epochs.Where(e => e.Epoch == 1), e => Assert.NotEmpty(e.Problems));
        foreach (var epoch in epochs.Where(e => e.Epoch != 1))
        {
            using var restored = new SmallNet(3, 5, 4, hidden: 500, seed: 99);
            using (var weights = reader.ReadSnapshot(epoch.SnapshotId!))
                restored.load(weights);
            Assert.Equal(Weights(model), Weights(restored)); // the weights never changed, so every snapshot holds them
        }
        Assert.Equal(epochs.Where(e => e.Epoch != 1).Select(e => e.Epoch), reader.Maps(run.Id).Where(m => m.Epoch != 1).Select(m => m.Epoch));
        _output.WriteLine($"full disk, epoch 1: {string.Join(" | ", failed.Reasons)}");
        monitor.Dispose(); // whatever LiteDB left behind after the failure becomes garbage here
        Finalizers.RunNow();
    }

    private static float[] Weights(nn.Module module) =>
        [.. module.parameters().SelectMany(p => p.detach().cpu().data<float>().ToArray())];

    private static int RawCount(RunStore store, string collection, int runId, int epoch)
    {
        using var raw = new LiteDB.LiteDatabase(new LiteDB.ConnectionString { Filename = store.Path, Connection = LiteDB.ConnectionType.Shared, ReadOnly = true });
        return raw.GetCollection(collection).Count(LiteDB.Query.And(LiteDB.Query.EQ("RunId", runId), LiteDB.Query.EQ("Epoch", epoch)));
    }

    private static string WritePolicy(TempFolder temp)
    {
        string path = temp.File("policy.json");
        File.WriteAllText(path, """{ "patience": 1 }""");
        return path;
    }

    private enum Fault
    {
        OutOfMemory,
        Infinite,
        WrongShape,
    }

    /// <summary>A real method that misbehaves at chosen epochs (counted by calls, one call per epoch).</summary>
    private sealed class FaultyMethod(IAttributionMethod inner) : IAttributionMethod
    {
        private int _calls;

        public int[] FailAt { get; init; } = [];

        public Fault Fault { get; init; }

        public string Name => inner.Name;

        public ImmutableSortedDictionary<string, string> Settings => inner.Settings;

        public ColumnAttribution Attribute(AttributionInput input)
        {
            int call = _calls++;
            var real = inner.Attribute(input);
            if (!FailAt.Contains(call))
                return real;
            return Fault switch
            {
                // What a managed allocation of an expanded batch too large for memory throws.
                Fault.OutOfMemory => throw new OutOfMemoryException("simulated: the expanded batch did not fit in memory"),
                Fault.Infinite => new ColumnAttribution(real.Rows, real.Columns, [.. real.Scores.Select((v, i) => i % 7 == 0 ? (i % 2 == 0 ? float.PositiveInfinity : float.NegativeInfinity) : v)], real.OutputGaps, real.Evaluations),
                _ => new ColumnAttribution(real.Rows, real.Columns - 1, real.Scores[..(real.Rows * (real.Columns - 1))], real.OutputGaps, real.Evaluations),
            };
        }
    }

    /// <summary>A small net whose weights cannot be serialised while <see cref="FailSnapshots"/> is set.</summary>
    private sealed class SnapshotFailingNet : nn.Module<Tensor, Tensor, Tensor>, IWatchedModel
    {
        private readonly SmallNet _inner;

        public SnapshotFailingNet()
            : base("snapshot-failing")
        {
            _inner = new SmallNet(3, 5, 4);
            RegisterComponents();
        }

        public bool FailSnapshots { get; set; }

        public FeatureSchema Schema => _inner.Schema;

        public nn.Module Module => this;

        public Tensor Encode(Tensor dense, Tensor categorical) => _inner.Encode(dense, categorical);

        public Tensor Score(Tensor features) => _inner.Score(features);

        public override Tensor forward(Tensor dense, Tensor categorical) => _inner.call(dense, categorical);

        public override Dictionary<string, Tensor> state_dict(Dictionary<string, Tensor>? destination = null, string? prefix = null) =>
            FailSnapshots ? throw new IOException("simulated: the weights could not be serialised") : base.state_dict(destination, prefix);
    }
}
