using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Hooks;

public sealed class SplitCheckStorageTests
{
    private static MonitorOptions Options(string store, SmallNet model) => new()
    {
        StorePath = store,
        RunName = "checked",
        Schema = model.Schema,
        Probe = TestProbes.Small(),
        Methods = [new IntegratedGradients(16)],
    };

    [Fact]
    public void TheRunStoresTheSplitCheckAndTheProbesValueCountsWhenNoneAreGiven()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using (new TrainingMonitor(Options(temp.File("s.litedb"), model)))
        {
        }
        using var reading = RunStore.OpenForReading(temp.File("s.litedb"));
        var run = reading.GetRun("checked");
        Assert.NotNull(run.SplitCheck);
        Assert.Equal(4, run.SplitCheck!.Inputs.Count);
        Assert.Equal(60, run.SplitCheck.TrainingRowsUsed);
        // Every one of the 60 training rows the probe was selected from is counted, not only the probe's 12.
        Assert.Equal(60, run.TrainingValueCounts["colour"].Values.Sum());
        var context = RunContext.FromRun(run);
        Assert.Equal(TestProbes.Small().SplitCheck!.Inputs.ToArray(), context.SplitCheck!.Inputs.ToArray());
        Assert.Equal(DriftWatch.Probing.RawInputKind.Categorical, context.SplitCheckOf(3)!.Kind);
        Assert.Equal(2, context.SplitCheckOf(2)!.Index);
    }

    [Fact]
    public void GivenValueCountsOverrideTheProbes()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var counts = ImmutableDictionary<string, ImmutableDictionary<long, int>>.Empty.Add("colour", ImmutableDictionary<long, int>.Empty.Add(1, 7));
        using (new TrainingMonitor(Options(temp.File("s.litedb"), model) with { TrainingValueCounts = counts }))
        {
        }
        using var reading = RunStore.OpenForReading(temp.File("s.litedb"));
        Assert.Equal(7, reading.GetRun("checked").TrainingValueCounts["colour"]["1"]);
    }

    [Fact]
    public void ARunWithoutTheCheckPassesTheStoreCheckAndADamagedOneDoesNot()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using (new TrainingMonitor(Options(temp.File("s.litedb"), model)))
        {
        }
        using var reading = RunStore.OpenForReading(temp.File("s.litedb"));
        var run = reading.GetRun("checked");
        // A run registered before the check was recorded has none, and still opens.
        Assert.Null(StoreChecks.Run("s", run with { SplitCheck = null }).SplitCheck);
        var damaged = run with { SplitCheck = run.SplitCheck! with { Inputs = [new SplitCheckInputDocument { Kind = "Dense", Index = 9 }] } };
        Assert.Throws<StoreException>(() => StoreChecks.Run("s", damaged));
    }
}
