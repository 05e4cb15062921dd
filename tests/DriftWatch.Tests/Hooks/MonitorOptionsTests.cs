using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;

namespace DriftWatch.Tests.Hooks;

public sealed class MonitorOptionsTests
{
    private static MonitorOptions Options(string store, IWatchedModel model) => new()
    {
        StorePath = store,
        RunName = "night-1",
        Schema = model.Schema,
        Probe = TestProbes.Small(),
        Methods = [new IntegratedGradients(8)],
    };

    [Fact]
    public void ValidateBuildsNoModelAndTheMonitorBuildsTheRecipeOnceToCheckIt()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var options = Options(temp.File("s.litedb"), model) with { Model = ModelRecipe.For<CountingFactory>([]) };
        CountingFactory.Built = 0;
        using var before = torch.random.get_rng_state();

        options.Validate();
        options.Validate();

        Assert.Equal(0, CountingFactory.Built);
        Assert.False(File.Exists(temp.File("s.litedb")));
        using (var monitor = new TrainingMonitor(options))
            Assert.Equal(1, CountingFactory.Built);
        using var after = torch.random.get_rng_state();
        Assert.Equal(before.data<byte>().ToArray(), after.data<byte>().ToArray());
    }

    [Fact]
    public void ARecipeOfAnotherSchemaIsRefusedByTheCheckTheMonitorRunsNotByValidate()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var options = Options(temp.File("s.litedb"), model) with { Model = ModelRecipe.For<CountingFactory>([new("dense", "4")]) };
        using var wider = new SmallNet(4, 5, 4);

        options.Validate();
        var e = Assert.Throws<DriftWatchException>(options.CheckModelRecipe);
        Assert.Contains("another feature schema than Schema", e.Message);
        Assert.Throws<DriftWatchException>(() => options.ValidateModelSchema(wider));
        options.ValidateModelSchema(model);
    }

    [Fact]
    public void ASettingOutOfRangeThrowsWhenItIsSet()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var options = Options(temp.File("s.litedb"), model);

        var cases = new (Func<MonitorOptions> Build, string Expected)[]
        {
            (() => options with { ChunkRows = 0 }, "ChunkRows must be at least 1; got 0"),
            (() => options with { MemoryBudgetBytes = -5 }, "MemoryBudgetBytes must be at least 1; got -5"),
            (() => options with { AttributeEvery = 0 }, "AttributeEvery must be at least 1; got 0"),
            (() => options with { RunName = " " }, "RunName is empty; give the run a name"),
            (() => options with { StorePath = "" }, "StorePath is empty"),
            (() => options with { Methods = [] }, "Methods is empty"),
            (() => options with { Methods = default }, "Methods is empty"),
            (() => options with { Methods = [new Saliency(), new Saliency()] }, "method 'saliency' is configured twice"),
            (() => options with { Policy = null! }, "Policy is null"),
            (() => options with { Schema = null! }, "Schema is null"),
            (() => options with { Probe = null! }, "Probe is null"),
            (() => options with { WatchedLayers = ["_scorer.1", " ", "_scorer.1"] }, "2 problems: WatchedLayers has an empty name; name each layer by its module path, e.g. '_scorer.1'; layer '_scorer.1' is in WatchedLayers twice"),
        };

        foreach (var (build, expected) in cases)
        {
            var e = Assert.Throws<DriftWatchException>(() => build());
            Assert.Contains(expected, e.Message);
            Assert.DoesNotContain('\n', e.Message);
        }
        Assert.Empty((options with { WatchedLayers = default }).WatchedLayers);
    }

    [Fact]
    public void ValidateNamesEveryProblemAtOnceOnOneLine()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var wide = new RowsBuilder().WithDense(4).Build();
        var options = Options(temp.File("s.litedb"), model) with
        {
            Probe = new ProbeSet(wide, wide),
            Baseline = Baseline.FromValues([1f, 2f]),
            BackgroundAttribution = true,
            TrainingValueCounts = ImmutableDictionary<string, ImmutableDictionary<long, int>>.Empty.Add("dense 1", ImmutableDictionary<long, int>.Empty.Add(1, 3)),
            WatchedLayers = ["_scorer.1"],
            LayerMethods = [new Saliency()],
        };

        var e = Assert.Throws<DriftWatchException>(options.Validate);

        Assert.StartsWith("5 problems: probe rows have 4 dense", e.Message);
        Assert.Contains("; given baseline has 2 values but the schema has", e.Message);
        Assert.Contains("; BackgroundAttribution needs Model", e.Message);
        Assert.Contains("; LayerMethods holds 'saliency', which is not a layer method", e.Message);
        Assert.Contains("; TrainingValueCounts names 'dense 1', which is not a categorical feature", e.Message);
        Assert.DoesNotContain('\n', e.Message);
    }

    // Counts the models it builds; settings: "dense", the number of dense inputs (default 3).
    public sealed class CountingFactory : IModelFactory
    {
        public static int Built { get; set; }

        public IWatchedModel Create(IReadOnlyDictionary<string, string> settings)
        {
            Built++;
            int dense = settings.TryGetValue("dense", out var text) ? int.Parse(text, System.Globalization.CultureInfo.InvariantCulture) : 3;
            return new SmallNet(dense, 5, 4);
        }
    }
}
