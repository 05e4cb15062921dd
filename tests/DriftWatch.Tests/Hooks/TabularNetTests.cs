using DriftWatch.Attribution;
using DriftWatch.Cli;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Hooks;
using DriftWatch.Hooks.Models;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Hooks;

public sealed class TabularNetTests
{
    private static readonly TabularNetSettings Small = new()
    {
        DenseNames = ["air temperature", "humidity", "light hours"],
        Categoricals = [new CategoricalEmbedding("bay", 5, 3), new CategoricalEmbedding("cultivar", 7, 2)],
        HiddenWidths = [16, 8],
        Activation = HiddenActivation.GELU,
        Dropout = 0.1,
    };

    // Invented rows for mechanics only: three dense values, two categorical ids, a label from a rule on them.
    private static ProbeRows Rows(int count, int seed)
    {
        var random = new Random(seed);
        var dense = new float[count * 3];
        var categorical = new long[count * 2];
        var labels = new float[count];
        for (int r = 0; r < count; r++)
        {
            for (int d = 0; d < 3; d++)
                dense[r * 3 + d] = (float)(random.NextDouble() * 4 - 2);
            categorical[r * 2] = random.Next(5);
            categorical[r * 2 + 1] = random.Next(7);
            labels[r] = dense[r * 3] + 0.4 * categorical[r * 2] - 0.3 * categorical[r * 2 + 1] > 0 ? 1f : 0f;
        }
        return new ProbeRows(dense, 3, categorical, 2, labels);
    }

    private static void Train(TabularNet model, ProbeRows data, optim.Optimizer optimizer)
    {
        model.train();
        using var scope = torch.NewDisposeScope();
        var logits = model.call(torch.tensor(data.Dense, [data.Count, 3]), torch.tensor(data.Categorical, [data.Count, 2])).squeeze(1);
        var loss = nn.functional.binary_cross_entropy_with_logits(logits, torch.tensor(data.Labels!));
        optimizer.zero_grad();
        loss.backward();
        optimizer.step();
    }

    private static string TrainRun(TempFolder temp)
    {
        string store = temp.File("tabular.litedb");
        torch.manual_seed(5);
        using var model = new TabularNet(Small);
        var data = Rows(120, 1);
        using var optimizer = optim.Adam(model.parameters(), 0.01);
        // No MonitorOptions.Model and no WatchedModel: the recipe is learned from the model at the first epoch.
        using var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = store,
            RunName = "tabular",
            Schema = model.Schema,
            Probe = ProbeSet.Select(Rows(60, 2), data, 16, seed: 3),
            Methods = [new IntegratedGradients(16)],
        });
        for (int epoch = 1; epoch <= 3; epoch++)
        {
            for (int step = 0; step < 5; step++)
                Train(model, data, optimizer);
            monitor.EndEpoch(model, epoch, new EpochMetrics(0.5, 0.6));
        }
        return store;
    }

    private static (int Code, string Output, string Error) Cli(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    [Fact]
    public void ARunOfTheTabularFamilyIsReattributedFromItsStoredSettingsWithNoAssemblyAndReproducesItsMaps()
    {
        using var temp = new TempFolder();
        string store = TrainRun(temp);
        using (var reading = RunStore.OpenForReading(store))
        {
            var run = reading.GetRun("tabular");
            Assert.Equal("DriftWatch.Hooks.Models.TabularNetFactory, DriftWatch.Hooks", run.ModelFactory);
            Assert.Equal("16,8", run.ModelSettings["hidden"]);
            Assert.Equal("GELU", run.ModelSettings["activation"]);
            Assert.Equal("""[["bay",5,3],["cultivar",7,2]]""", run.ModelSettings["categorical"]);
        }

        var (code, output, error) = Cli("reattribute", "tabular", "--store", store, "--method", "integrated-gradients");

        Assert.True(code == ExitCodes.Fine, error);
        Assert.True(output.Contains("3 of 3 epochs re-attributed with integrated-gradients (quadrature=RiemannMidpoint, steps=16)", StringComparison.Ordinal), output);
        Assert.Contains("model rebuilt by DriftWatch.Hooks.Models.TabularNetFactory", output);
        // Integrated Gradients is a deterministic function of the model, the input and the baseline (Sundararajan, Taly,
        // Yan 2017, eq. 1): the same snapshot, probe rows and settings must give the same map.
        using var after = RunStore.OpenForReading(store);
        var id = after.GetRun("tabular").Id;
        var originals = after.Maps(id, "integrated-gradients").ToDictionary(m => m.Epoch);
        var again = after.Maps(id, "re-integrated-gradients");
        Assert.Equal(3, again.Count);
        foreach (var map in again)
        {
            var expected = FloatBytes.ToFloats(originals[map.Epoch].Scores);
            var recomputed = FloatBytes.ToFloats(map.Scores);
            Assert.Equal(expected.Length, recomputed.Length);
            Assert.Equal(32 * 5, recomputed.Length);
            double largest = expected.Zip(recomputed, (a, b) => Math.Abs(a - b)).Max();
            Assert.True(largest <= 1e-5, $"epoch {map.Epoch}: largest difference {largest}");
            Assert.Contains(expected, v => v != 0);
        }
    }

    [Fact]
    public void ASnapshotThatDoesNotFitTheRebuiltFamilyModelNamesTheFirstMismatchedParameter()
    {
        using var temp = new TempFolder();
        string store = TrainRun(temp);
        using (var writing = RunStore.OpenForWriting(store))
        {
            var run = writing.GetRun("tabular");
            run.ModelSettings["hidden"] = "16,4";
            writing.UpdateRun(run);
        }

        var (code, output, error) = Cli("reattribute", "tabular", "--store", store, "--method", "saliency");

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Equal("", output);
        // Layers: Linear 0, GELU 1, Dropout 2, Linear 3 …: the second hidden layer is the first that differs.
        Assert.Contains("does not fit the rebuilt model: parameter '_scorer.3.weight' is Float32 [8, 16] in the snapshot but Float32 [4, 16] in the model", error);
    }

    [Fact]
    public void AWatchedModelOfTheFamilyRecordsItsRecipeBeforeTheFirstEpoch()
    {
        using var temp = new TempFolder();
        using var model = new TabularNet(Small with { Dropout = 0 });
        using var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = temp.File("s.litedb"),
            RunName = "watched",
            Schema = model.Schema,
            Probe = ProbeSet.Select(Rows(20, 2), Rows(20, 1), 8, seed: 3),
            WatchedModel = model,
        });

        Assert.Equal(ModelRecipe.StoredName(typeof(TabularNetFactory)), monitor.Run.ModelFactory);
        Assert.Equal("0", monitor.Run.ModelSettings["dropout"]);
    }

    [Fact]
    public void StoredSettingsReadBackEqualAndBadOnesNameTheirKey()
    {
        var back = TabularNetSettings.FromStored(Small.ToStored());

        Assert.Equal(Small.DenseNames.ToArray(), back.DenseNames.ToArray());
        Assert.Equal(Small.Categoricals.ToArray(), back.Categoricals.ToArray());
        Assert.Equal(Small.HiddenWidths.ToArray(), back.HiddenWidths.ToArray());
        Assert.Equal((Small.Activation, Small.Dropout, Small.Outputs), (back.Activation, back.Dropout, back.Outputs));
        using var model = new TabularNet(back);
        Assert.Equal(["air temperature", "humidity", "light hours", "bay", "cultivar"], model.Schema.Names.ToArray());
        Assert.Equal(3 + 3 + 2, model.Schema.ColumnCount);

        var stored = new Dictionary<string, string>(Small.ToStored());
        Assert.Contains("setting 'activation' is malformed", Assert.Throws<DriftWatchException>(() => TabularNetSettings.FromStored(new Dictionary<string, string>(stored) { ["activation"] = "Swish" })).Message);
        Assert.Contains("setting 'hidden' is malformed", Assert.Throws<DriftWatchException>(() => TabularNetSettings.FromStored(new Dictionary<string, string>(stored) { ["hidden"] = "16;8" })).Message);
        Assert.Contains("lack 'dropout'", Assert.Throws<DriftWatchException>(() => TabularNetSettings.FromStored(stored.Where(kv => kv.Key != "dropout").ToDictionary())).Message);
        Assert.Contains("categorical 'bay' has embedding width 0", Assert.Throws<DriftWatchException>(() => new TabularNet(Small with { Categoricals = [new CategoricalEmbedding("bay", 5, 0)] })).Message);
        Assert.Contains("dropout must be at least 0 and below 1; got 1", Assert.Throws<DriftWatchException>(() => new TabularNet(Small with { Dropout = 1 })).Message);
    }

    [Fact]
    public void TheFamilyBuildsTheDemosGreenhouseModelWithTheSameWeightsFromTheSameSeed()
    {
        // The demo's GreenhouseNet is dense inputs plus 8-wide embeddings and a 64-64 ReLU head; the family with those
        // settings creates the same parameters in the same order, so one seed gives identical weights.
        var scenario = ScenarioBuilder.For(GreenhouseVariant.Clean).WithSeed(1).WithTrainingRows(50).Build();
        torch.manual_seed(9);
        using var demo = GreenhouseNet.For(scenario);
        torch.manual_seed(9);
        using var family = new TabularNet(new TabularNetSettings
        {
            DenseNames = [.. scenario.DenseFeatures.Select(f => f.Name)],
            Categoricals = [.. scenario.CategoricalFeatures.Select(f => new CategoricalEmbedding(f.Name, f.Levels, 8))],
            HiddenWidths = [64, 64],
        });

        var a = demo.state_dict();
        var b = family.state_dict();
        Assert.Equal(a.Keys, b.Keys);
        Assert.All(a.Keys, k => Assert.True(a[k].eq(b[k]).all().item<bool>(), $"{k} differs"));
        Assert.Equal(demo.Schema.Names.ToArray(), family.Schema.Names.ToArray());
    }
}
