using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Layers;

public sealed class LayerStoreTests
{
    private static LayerMapDocument Map(int runId, int epoch, float value) => new()
    {
        RunId = runId,
        Epoch = epoch,
        Layer = "_scorer.1",
        Method = "layer-conductance",
        Target = "logit",
        Rows = 2,
        Units = 3,
        Scores = FloatBytes.FromFloats([value, 2, 3, 4, 5, 6]),
        OutputGaps = FloatBytes.FromFloats([6, 15]),
        Deltas = FloatBytes.FromFloats([0, 0]),
        Outputs = FloatBytes.FromFloats([1.5f, -2]),
        Seconds = 0.25,
        Evaluations = 66,
        Settings = new Dictionary<string, string> { ["steps"] = "32" },
    };

    [Fact]
    public void LayerMapsRoundTripWithTheirEpochAndAResumedEpochReplacesThem()
    {
        using var temp = new TempFolder();
        using var store = RunStore.OpenForWriting(temp.File("layers.litedb"));
        var run = store.AddRun(new RunDocument { Name = "r" });

        store.InOneTransaction(() =>
        {
            store.WriteLayerMap(Map(run.Id, 1, 1));
            store.WriteEpoch(new EpochDocument { RunId = run.Id, Epoch = 1 });
        });
        store.WriteLayerMap(Map(run.Id, 2, 1)); // epoch 2 never completed: invisible

        var read = Assert.Single(store.LayerMaps(run.Id, "_scorer.1"));
        Assert.Equal(1, read.Epoch);
        Assert.Equal([1f, 2, 3, 4, 5, 6], FloatBytes.ToFloats(read.Scores));
        Assert.Equal([1.5f, -2], FloatBytes.ToFloats(read.Outputs));
        Assert.Equal([6f, 15], FloatBytes.ToFloats(read.OutputGaps!));
        Assert.Equal("32", read.Settings["steps"]);
        Assert.Equal(66, read.Evaluations);
        Assert.Equal([("_scorer.1", "layer-conductance")], store.LayerMapKinds(run.Id));
        Assert.Empty(store.LayerMaps(run.Id, "other"));

        // The same epoch written again (a resumed run) replaces the map instead of adding a second.
        store.InOneTransaction(() =>
        {
            store.WriteLayerMap(Map(run.Id, 1, 9));
            store.WriteEpoch(new EpochDocument { RunId = run.Id, Epoch = 1 });
        });
        read = Assert.Single(store.LayerMaps(run.Id, "_scorer.1"));
        Assert.Equal(9f, FloatBytes.ToFloats(read.Scores)[0]);
    }

    [Fact]
    public void AFailedEpochTransactionLeavesNoLayerMap()
    {
        using var temp = new TempFolder();
        using var store = RunStore.OpenForWriting(temp.File("layers.litedb"));
        var run = store.AddRun(new RunDocument { Name = "r" });

        Assert.Throws<InvalidOperationException>(() => store.InOneTransaction(() =>
        {
            store.WriteLayerMap(Map(run.Id, 1, 1));
            throw new InvalidOperationException("the epoch failed after its layer map");
        }));
        store.WriteEpoch(new EpochDocument { RunId = run.Id, Epoch = 1 });

        Assert.Empty(store.LayerMaps(run.Id, "_scorer.1"));
    }
}
