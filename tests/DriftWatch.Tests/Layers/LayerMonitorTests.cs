using DriftWatch.Attribution;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Layers;

public sealed class LayerMonitorTests
{
    private static ProbeSet Probe() => TestProbes.Small();

    private static MonitorOptions Options(string store, SmallNet model) => new()
    {
        StorePath = store,
        RunName = "layers",
        Schema = model.Schema,
        Probe = Probe(),
        Methods = [new IntegratedGradients(16)],
        WatchedLayers = ["_body.1", "_body.3"],
        LayerMethods = [new LayerConductance(64), new LayerActivation()],
        WatchedModel = model,
    };

    [Fact]
    public void WatchedLayersGetOneMapPerMethodEveryEpochAndNoHookStaysBehind()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        using (var monitor = new TrainingMonitor(Options(temp.File("s.litedb"), model)))
        {
            for (int epoch = 1; epoch <= 3; epoch++)
            {
                var verdict = monitor.EndEpoch(model, epoch, new EpochMetrics(0.5, 0.6));
                Assert.DoesNotContain(verdict.Reasons, r => r.Contains("failed", StringComparison.Ordinal));
            }
        }
        foreach (var (name, module) in model.named_modules())
            Assert.True(module is not nn.Module<Tensor, Tensor> || HookCount.Of(module) == 0, $"a hook stayed on '{name}'");

        using var store = RunStore.OpenForReading(temp.File("s.litedb"));
        var run = store.GetRun("layers");
        Assert.Equal(
            [("_body.1", "layer-activation"), ("_body.1", "layer-conductance"), ("_body.3", "layer-activation"), ("_body.3", "layer-conductance")],
            store.LayerMapKinds(run.Id));
        var conductance = store.LayerMaps(run.Id, "_body.1", "layer-conductance");
        Assert.Equal([1, 2, 3], conductance.Select(m => m.Epoch));
        Assert.All(conductance, m => Assert.Equal((24, 16), (m.Rows, m.Units)));
        // Every path crosses the hidden layer, so each row's delta is small against its gap (Dhamdhere et al. 2018, completeness).
        var gaps = FloatBytes.ToFloats(conductance[0].OutputGaps!);
        var deltas = FloatBytes.ToFloats(conductance[0].Deltas!);
        Assert.True(deltas.Average() <= 0.01 * gaps.Average(Math.Abs) + 1e-6, $"mean delta {deltas.Average()} against mean |gap| {gaps.Average(Math.Abs)}");
        // The stored outputs are the model's logits on the probe rows.
        var probe = Probe();
        using (torch.no_grad())
        {
            var logits = model.call(torch.tensor(probe.Rows.Dense, [probe.Count, 3]), torch.tensor(probe.Rows.Categorical, [probe.Count, 1])).squeeze(1).data<float>().ToArray();
            var stored = FloatBytes.ToFloats(conductance[^1].Outputs);
            for (int r = 0; r < probe.Count; r++)
                Assert.Equal(logits[r], stored[r], 4);
        }
        Assert.Null(store.LayerMaps(run.Id, "_body.1", "layer-activation")[0].OutputGaps);
    }

    [Fact]
    public void AnUnknownLayerOrANonLayerMethodIsRefusedBeforeTraining()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);

        var unknown = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(temp.File("a.litedb"), model) with { WatchedLayers = ["_body.7"] }));
        Assert.Contains("no layer '_body.7'", unknown.Message, StringComparison.Ordinal);
        Assert.Contains("_body.1", unknown.Message, StringComparison.Ordinal);

        var notLayer = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(temp.File("b.litedb"), model) with { LayerMethods = [new IntegratedGradients()] }));
        Assert.Contains("not a layer method", notLayer.Message, StringComparison.Ordinal);
        Assert.False(File.Exists(temp.File("a.litedb")));
    }

    [Fact]
    public void AResumedRunKeepsItsWatchedLayersAndLayerMethods()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string path = temp.File("s.litedb");
        using (var monitor = new TrainingMonitor(Options(path, model)))
            monitor.EndEpoch(model, 1, new EpochMetrics(0.5, 0.6));

        // The same layers in another order resume; another set of layers or other layer settings is refused, unchanged.
        using (var monitor = new TrainingMonitor(Options(path, model) with { WatchedLayers = ["_body.3", "_body.1"], Resume = true }))
            monitor.EndEpoch(model, 2, new EpochMetrics(0.5, 0.6));
        var fewer = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(path, model) with { WatchedLayers = ["_body.1"], Resume = true }));
        Assert.Contains("different set of watched layers (_body.1, _body.3 stored, _body.1 given)", fewer.Message, StringComparison.Ordinal);
        var none = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(path, model) with { WatchedLayers = [], Resume = true }));
        Assert.Contains("(_body.1, _body.3 stored, none given)", none.Message, StringComparison.Ordinal);
        var settings = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(path, model) with { LayerMethods = [new LayerConductance(32), new LayerActivation()], Resume = true }));
        Assert.Contains("different set of layer method settings", settings.Message, StringComparison.Ordinal);

        using var store = RunStore.OpenForReading(path);
        var run = store.GetRun("layers");
        Assert.Equal(["_body.1", "_body.3"], run.WatchedLayers!);
        Assert.Equal(["layer-conductance", "layer-activation"], run.LayerMethods!.Select(m => m.Name));
        Assert.Equal([1, 2], store.LayerMaps(run.Id, "_body.1", "layer-conductance").Select(m => m.Epoch));
    }

    [Fact]
    public void ARunRegisteredBeforeLayersWereRecordedLearnsThemOnResume()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string path = temp.File("s.litedb");
        using (var monitor = new TrainingMonitor(Options(path, model) with { WatchedLayers = [] }))
            monitor.EndEpoch(model, 1, new EpochMetrics(0.5, 0.6));
        using (var store = RunStore.OpenForWriting(path))
        {
            // As an older DriftWatch left it: no record of watched layers at all.
            var run = store.GetRun("layers");
            run.WatchedLayers = null;
            run.LayerMethods = null;
            store.UpdateRun(run);
        }

        using (var monitor = new TrainingMonitor(Options(path, model) with { Resume = true }))
            monitor.EndEpoch(model, 2, new EpochMetrics(0.5, 0.6));

        using var reader = RunStore.OpenForReading(path);
        Assert.Equal(["_body.1", "_body.3"], reader.GetRun("layers").WatchedLayers!);
    }
}
