using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Bad configuration reaches the library as a typed <see cref="DriftWatchException"/> when the monitor is built (or,
/// for what only an epoch can show, in strict mode), with one line naming the problem, and nothing stored changes.
/// </summary>
public sealed class ConfigurationTests
{
    private readonly ITestOutputHelper _output;

    public ConfigurationTests(ITestOutputHelper output) => _output = output;

    private static ProbeSet Probe() => TestProbes.Small();

    private static MonitorOptions Options(string store, IWatchedModel model) => new()
    {
        StorePath = store,
        RunName = "night-1",
        Schema = model.Schema,
        Probe = Probe(),
        Methods = [new IntegratedGradients(8)],
        WatchedModel = model,
        Resume = true, // the cases below reopen the run: what they change is refused, not the reopening itself
    };

    [Fact]
    public void EveryBadConfigurationIsATypedOneLineErrorAndTheStoreIsUnchanged()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        using (var monitor = new TrainingMonitor(Options(store, model)))
            monitor.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));
        byte[] before = File.ReadAllBytes(store);
        using var wider = new SmallNet(3, 5, 4, hidden: 32);
        var wide = new RowsBuilder().WithDense(4).Build();
        using var other = new FunctionModel(4, x => x.sum(dim: 1));

        var cases = new (string What, Func<object?> Act, string Expected)[]
        {
            ("run name with stored epochs, without Resume", () => new TrainingMonitor(Options(store, model) with { Resume = false }), "set MonitorOptions.Resume = true to continue it from epoch 1"),
            ("run name used by a different model", () => new TrainingMonitor(Options(store, wider)), "model of another shape"),
            ("model whose schema is not the options' schema", () => new TrainingMonitor(Options(store, model) with { WatchedModel = other }), "WatchedModel's schema differs"),
            ("probe wider than the schema", () => new TrainingMonitor(Options(store, model) with { Probe = new ProbeSet(wide, wide) }), "4 dense"),
            ("another probe set for the same run", () => new TrainingMonitor(Options(store, model) with { Probe = ProbeSet.Select(Probe().Rows, Probe().Rows, 10, 4) }), "different probe set"),
            ("another method setting for the same run", () => new TrainingMonitor(Options(store, model) with { Methods = [new IntegratedGradients(16)] }), "attribution method settings"),
            ("the same method twice", () => new TrainingMonitor(Options(store, model) with { Methods = [new Saliency(), new Saliency()] }), "configured twice"),
            ("chunk of zero rows", () => new TrainingMonitor(Options(store, model) with { ChunkRows = 0 }), "ChunkRows"),
            ("attribute every 0th epoch", () => new TrainingMonitor(Options(store, model) with { AttributeEvery = 0 }), "AttributeEvery"),
            ("empty run name", () => new TrainingMonitor(Options(store, model) with { RunName = " " }), "RunName"),
            ("store path that is a folder", () => new TrainingMonitor(Options(temp.Path, model)), "is a folder"),
            ("value counts for a dense feature", () => new TrainingMonitor(Options(store, model) with { TrainingValueCounts = Counts("dense 1") }), "not a categorical"),
            ("feature named twice", () => Schema("tray", "humidity", "tray"), "used twice"),
            ("feature with an empty name", () => Schema("tray", ""), "empty name"),
            ("feature with a blank name", () => Schema("tray", "  "), "empty name"),
            ("schema without features", () => FeatureSchema.CreateBuilder().Build(), "empty"),
            ("policy with an unknown key", () => GatePolicy.Parse("""{ "warmup": 1 }"""), "unknown key 'warmup'"),
            ("policy value out of range", () => GatePolicy.Parse("""{ "purityLowerBound": 0 }"""), "purityLowerBound"),
        };

        foreach (var (what, act, expected) in cases)
        {
            var e = Assert.ThrowsAny<DriftWatchException>(() => (act() as IDisposable)?.Dispose());
            Assert.True(e.Message.Contains(expected, StringComparison.Ordinal), $"{what}: {e.Message}");
            Assert.DoesNotContain('\n', e.Message);
            _output.WriteLine($"{what}: {e.Message}");
        }

        Assert.Equal(before, File.ReadAllBytes(store));
        _output.WriteLine($"bad configurations tried: {cases.Length}; each a DriftWatchException at configuration, the store unchanged");
    }

    [Fact]
    public void EpochsOutOfOrderAreATypedErrorInStrictModeAndChangeNothing()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        using var monitor = new TrainingMonitor(Options(store, model) with { Strict = true });
        monitor.EndEpoch(model, 4, new EpochMetrics(0.7, 0.7));
        byte[] before = File.ReadAllBytes(store);

        var e = Assert.Throws<DriftWatchException>(() => monitor.EndEpoch(model, 2, new EpochMetrics(0.6, 0.7)));

        Assert.Contains("epoch 2 comes before epoch 4, the last stored epoch of run 'night-1'; epochs must increase: pass epoch 5 or later", e.Message);
        Assert.Equal(before, File.ReadAllBytes(store));
        Assert.Equal(4, monitor.LastEpoch);
    }

    [Fact]
    public void WithoutTheModelInTheOptionsADifferentModelFailsEachEpochButNeverTheLoop()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        using (var first = new TrainingMonitor(Options(store, model)))
            first.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));
        using var wider = new SmallNet(3, 5, 4, hidden: 32);

        using var monitor = new TrainingMonitor(Options(store, wider) with { WatchedModel = null });
        var verdict = monitor.EndEpoch(wider, 1, new EpochMetrics(0.7, 0.7));

        Assert.Contains("model of another shape", Assert.Single(verdict.Findings).Evidence);
        Assert.Equal([0], monitor.Store.Epochs(monitor.Run.Id).Select(e => e.Epoch));
    }

    private static FeatureSchema Schema(params string[] names)
    {
        var builder = FeatureSchema.CreateBuilder();
        foreach (string name in names)
            builder.AddDense(name);
        return builder.Build();
    }

    private static System.Collections.Immutable.ImmutableDictionary<string, System.Collections.Immutable.ImmutableDictionary<long, int>> Counts(string feature) =>
        System.Collections.Immutable.ImmutableDictionary<string, System.Collections.Immutable.ImmutableDictionary<long, int>>.Empty
            .Add(feature, System.Collections.Immutable.ImmutableDictionary<long, int>.Empty.Add(1, 3));
}
