using DriftWatch.Attribution;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Model;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Attribution;

[Collection(DemoStoreCollection.Name)]
public sealed class ReattributionTests
{
    private readonly DemoStoreFixture _fixture;

    public ReattributionTests(DemoStoreFixture fixture) => _fixture = fixture;

    private string CopyOfStore(TempFolder temp)
    {
        string copy = temp.File("copy.litedb");
        File.Copy(_fixture.StorePath, copy);
        return copy;
    }

    [Theory]
    [InlineData(DemoStoreFixture.LeakRun)]
    [InlineData(DemoStoreFixture.CleanRun)]
    public void ReattributingADemoRunWithItsOwnMethodReproducesTheStoredMapsAndLeavesThemAlone(string runName)
    {
        // The same snapshot, probe rows and Integrated Gradients settings must give the same map: a check that the
        // snapshot, the recorded model recipe and the stored probe set together are the trained model's (Sundararajan,
        // Taly, Yan 2017 define IG as a deterministic function of F, x and x′).
        using var temp = new TempFolder();
        string path = CopyOfStore(temp);
        using var store = RunStore.OpenForWriting(path);
        var run = store.GetRun(runName);
        Assert.Equal(ModelRecipe.StoredName(typeof(GreenhouseNetFactory)), run.ModelFactory);
        var originals = store.Maps(run.Id, "integrated-gradients").ToDictionary(m => m.Epoch);
        var method = AttributionMethods.Create("integrated-gradients", run.Methods[0].Settings);
        using var model = (GreenhouseNet)ModelRecipe.Build(typeof(GreenhouseNetFactory), run.ModelSettings);
        var seen = new List<ReattributedEpoch>();

        var results = Reattribution.Run(store, run, model, new ReattributionOptions { Method = method }, new Progress(seen));

        Assert.All(results, r => Assert.Equal(ReattributionOutcome.Stored, r.Outcome));
        Assert.Equal(results, seen);
        Assert.Equal(originals.Keys.Order(), results.Select(r => r.Epoch));
        Assert.Equal(originals.Count, store.Maps(run.Id, "re-integrated-gradients").Count);
        foreach (var again in store.Maps(run.Id, "re-integrated-gradients"))
        {
            var original = FloatBytes.ToFloats(originals[again.Epoch].Scores);
            var recomputed = FloatBytes.ToFloats(again.Scores);
            Assert.Equal(original.Length, recomputed.Length);
            for (int i = 0; i < original.Length; i++)
                Assert.True(Math.Abs(original[i] - recomputed[i]) <= 1e-5, $"epoch {again.Epoch}, score {i}: stored {original[i]}, recomputed {recomputed[i]}");
            Assert.Equal("integrated-gradients", again.SourceMethod);
            var agreement = Assert.Single(store.Quality(run.Id, "re-integrated-gradients"), q => q.Epoch == again.Epoch).Agreement;
            Assert.Equal(1.0, Assert.Single(agreement, a => a.Method == "integrated-gradients").Spearman, 9);
        }
        var after = store.Maps(run.Id, "integrated-gradients");
        Assert.Equal(originals.Count, after.Count);
        Assert.All(after, m => Assert.True(originals[m.Epoch].Id == m.Id && originals[m.Epoch].Scores.SequenceEqual(m.Scores), $"epoch {m.Epoch}'s original map changed"));

        var twice = Reattribution.Run(store, run, model, new ReattributionOptions { Method = method });
        Assert.All(twice, r => Assert.Equal(ReattributionOutcome.AlreadyStored, r.Outcome));
    }

    [Fact]
    public void ASnapshotThatDoesNotFitTheRebuiltModelNamesTheFirstMismatchedParameter()
    {
        using var temp = new TempFolder();
        string path = CopyOfStore(temp);
        using var store = RunStore.OpenForWriting(path);
        var run = store.GetRun(DemoStoreFixture.LeakRun);
        var settings = new Dictionary<string, string>(run.ModelSettings) { ["hidden"] = "32" };
        using var model = (GreenhouseNet)ModelRecipe.Build(typeof(GreenhouseNetFactory), settings);
        int before = store.Maps(run.Id).Count;

        var error = Assert.Throws<DriftWatchException>(() =>
            Reattribution.Run(store, run, model, new ReattributionOptions { Method = new GradientTimesInput(), FirstEpoch = 2, LastEpoch = 3 }));

        Assert.Contains("the snapshot of epoch 2 of run 'leak-test' does not fit the rebuilt model: parameter '_scorer.0.weight' is Float32 [64, 48] in the snapshot but Float32 [32, 48] in the model", error.Message);
        Assert.Equal(before, store.Maps(run.Id).Count);
    }

    [Fact]
    public void RequestsThatWouldHideOrMixMapsAreRefusedBeforeAnythingIsWritten()
    {
        using var temp = new TempFolder();
        string path = CopyOfStore(temp);
        using var store = RunStore.OpenForWriting(path);
        var run = store.GetRun(DemoStoreFixture.CleanRun);
        using var model = (GreenhouseNet)ModelRecipe.Build(typeof(GreenhouseNetFactory), run.ModelSettings);

        var own = Assert.Throws<DriftWatchException>(() => Reattribution.Check(store, run, model, new ReattributionOptions { Method = new Saliency(), StoredName = "integrated-gradients" }));
        var range = Assert.Throws<DriftWatchException>(() => Reattribution.Check(store, run, model, new ReattributionOptions { Method = new Saliency(), FirstEpoch = 40, LastEpoch = 50 }));
        Reattribution.Run(store, run, model, new ReattributionOptions { Method = new SmoothGrad(samples: 2), StoredName = "smooth", FirstEpoch = 1, LastEpoch = 1 });
        var mixed = Assert.Throws<DriftWatchException>(() => Reattribution.Check(store, run, model, new ReattributionOptions { Method = new SmoothGrad(samples: 3), StoredName = "smooth" }));

        Assert.Contains("is one of run 'clean-test''s own methods", own.Message);
        Assert.Contains("has no complete epoch in 40..50; its epochs run from 1 to", range.Message);
        Assert.Contains("already has maps named 'smooth' made by smoothgrad(noise=0.15, samples=2, seed=0)", mixed.Message);
    }

    [Fact]
    public void SnapshotEntriesAreReadWithoutLoadingTheWeights()
    {
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var run = store.GetRun(DemoStoreFixture.CleanRun);
        using var snapshot = store.ReadSnapshot(store.Epochs(run.Id)[0].SnapshotId!);
        using var model = (GreenhouseNet)ModelRecipe.Build(typeof(GreenhouseNetFactory), run.ModelSettings);

        var entries = Snapshots.ReadEntries(snapshot);

        Assert.Equal(model.state_dict().Keys, entries.Select(e => e.Name));
        Assert.Equal(model.state_dict().Values.Select(t => t.shape), entries.Select(e => e.Shape.ToArray()));
        Assert.Equal(snapshot.Length, snapshot.Position);
        using var truncated = new MemoryStream(snapshot.ToArray()[..100]);
        Assert.Contains("truncated", Assert.Throws<DriftWatchException>(() => Snapshots.ReadEntries(truncated)).Message);
    }

    private sealed class Progress(List<ReattributedEpoch> seen) : IProgress<ReattributedEpoch>
    {
        public void Report(ReattributedEpoch value) => seen.Add(value);
    }
}
