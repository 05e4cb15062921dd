using DriftWatch.Detection;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Storage;

public sealed class StoredReadModelTests
{
    [Fact]
    public void StoredVerdictsReadTheGatesVerdictsWithTheirFindings()
    {
        using var folder = new TempFolder();
        string path = folder.File("verdicts.litedb");
        var run = new StoreBuilder().WithFeatures("alpha", "beta", "gamma").WithEpochs(5).WithLeakFinding(feature: 1, fromEpoch: 4).Build(path);
        using var store = RunStore.OpenForReading(path);

        var verdicts = store.StoredVerdicts(run.Id);

        Assert.Equal([1, 2, 3, 4, 5], verdicts.Select(v => v.Epoch));
        Assert.Equal([VerdictKind.Continue, VerdictKind.Continue, VerdictKind.Continue, VerdictKind.Halt, VerdictKind.Halt], verdicts.Select(v => v.Kind));
        var leak = Assert.Single(verdicts[4].Findings);
        Assert.Equal(FindingKind.Leak, leak.Kind);
        Assert.Equal("beta", leak.Feature);
        Assert.Equal(0.2, leak.Size);
        Assert.Equal(new EpochSpan(4, 5), leak.Epochs);
        Assert.Empty(verdicts[0].Findings);
    }

    [Fact]
    public void ImportanceReadsEachMapsHalvesWithoutItsRows()
    {
        using var folder = new TempFolder();
        string path = folder.File("importance.litedb");
        var run = new StoreBuilder().WithFeatures("alpha", "beta", "gamma").WithEpochs(3).Build(path);
        using var store = RunStore.OpenForReading(path);

        var importance = store.Importance(run.Id);
        var maps = store.Maps(run.Id);

        Assert.Equal(maps.Count, importance.Count);
        for (int i = 0; i < maps.Count; i++)
        {
            Assert.Equal((maps[i].Epoch, maps[i].Method, maps[i].Target), (importance[i].Epoch, importance[i].Method, importance[i].Target));
            Assert.Equal(maps[i].HeldOut.Share, importance[i].HeldOut.Share);
            Assert.Equal(maps[i].Training.MeanAbsolute, importance[i].Training.MeanAbsolute);
            Assert.Equal(3, importance[i].HeldOut.MeanSigned.Length);
            Assert.Equal(1.0, importance[i].HeldOut.Share.Sum(), 9);
        }
        Assert.Empty(store.Importance(run.Id, "no-such-method"));
    }

    [Fact]
    public void StoredRunsAndEpochsNameWhatAProgramNeedsToReadTheRestAndHandOutNothingWritable()
    {
        using var folder = new TempFolder();
        string path = folder.File("runs.litedb");
        new StoreBuilder().WithRun("first").WithFeatures("alpha", "beta").WithEpochs(3).Build(path);
        new StoreBuilder().WithRun("second").WithFeatures("alpha", "beta", "gamma").WithEpochs(2).Build(path);
        using var store = RunStore.OpenForReading(path);

        var runs = store.StoredRuns();
        var epochs = store.StoredEpochs("second");

        Assert.Equal(["first", "second"], runs.Select(r => r.Name));
        Assert.Equal(new[] { "alpha", "beta", "gamma" }, runs[1].Features.ToArray());
        Assert.Equal([1, 2], epochs.Select(e => e.Epoch));
        Assert.Contains(MetricKeys.ValidationLoss, epochs[0].Metrics.Keys);
        Assert.Equal(store.StoredVerdicts(runs[1].Id).Count, epochs.Count);
        var error = Assert.Throws<StoreException>(() => store.StoredEpochs("third"));
        Assert.Contains("third", error.Message, StringComparison.Ordinal);
        // Public members of the store take and return read models only; the documents stay inside DriftWatch.
        var exposed = typeof(RunStore).GetMethods().SelectMany(m => m.GetParameters().Select(p => p.ParameterType).Append(m.ReturnType));
        Assert.DoesNotContain(exposed, t => t.Namespace == typeof(RunStore).Namespace && t.Name.EndsWith("Document", StringComparison.Ordinal));
    }
}
