using System.Text.Json;
using DriftWatch.Charts;
using DriftWatch.Cli;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Layers;
using DriftWatch.Storage;
using DriftWatch.Tests.Charts;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Cli;

[Collection(DemoStoreCollection.Name)]
public sealed class NeuronsCommandTests
{
    private readonly DemoStoreFixture _fixture;

    public NeuronsCommandTests(DemoStoreFixture fixture) => _fixture = fixture;

    private static (int Code, string Output, string Error) Run(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    [Fact]
    public void NeuronsOnTheDemoStorePrintsTheClassesAndDrawsTheNeuronMap()
    {
        using var temp = new TempFolder();

        var (code, output, error) = Run("neurons", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--layer", GreenhouseNet.FirstHiddenLayer, "--colour", "conductance", "--out", temp.Path);

        Assert.Equal(ExitCodes.Fine, code);
        Assert.Equal("", error);
        Assert.Contains("layer _scorer.1 (64 units), layer-conductance", output, StringComparison.Ordinal);
        Assert.Contains("Classes over epochs 1–", output, StringComparison.Ordinal);
        Assert.Contains("Conductance describes the model, not causes", output, StringComparison.Ordinal);
        string chart = output.Split('\n').Single(l => l.StartsWith("neuron map: ", StringComparison.Ordinal))["neuron map: ".Length..].Trim();
        PngAssert.IsChart(chart, 1200, NeuronMapChart.ReadableHeight(64, 700));
    }

    [Fact]
    public void JsonCountsAgreeWithTheAuditOfTheStoredLayerMaps()
    {
        var (code, output, _) = Run("neurons", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--json", "--no-chart", "--half", "held-out");

        Assert.Equal(ExitCodes.Fine, code);
        using var json = JsonDocument.Parse(output);
        var root = json.RootElement;
        Assert.Equal(JsonValueKind.Null, root.GetProperty("chart").ValueKind);
        Assert.Equal(64, root.GetProperty("units").GetInt32());

        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var run = store.GetRun(DemoStoreFixture.CleanRun);
        var maps = store.LayerMaps(run.Id, GreenhouseNet.FirstHiddenLayer, "layer-conductance");
        Assert.Equal(store.Epochs(run.Id).Count, maps.Count); // a layer map at every stored epoch
        var audit = NeuronAudit.Run(maps, run.Target, new NeuronAuditOptions(), [.. Enumerable.Range(0, run.HeldOutRows)]);
        Assert.Equal(run.HeldOutRows, root.GetProperty("rowsPerEpoch").GetInt32());
        foreach (var kind in Enum.GetValues<NeuronClass>())
            Assert.Equal(audit.Count(kind), root.GetProperty("counts").GetProperty(NeuronAudit.Label(kind)).GetInt32());
        Assert.Equal(maps.Count, root.GetProperty("perEpoch").GetArrayLength());
        foreach (var unit in root.GetProperty("unitFigures").EnumerateArray())
        {
            double sum = unit.GetProperty("positive").GetDouble() + unit.GetProperty("negative").GetDouble() + unit.GetProperty("nearZero").GetDouble();
            Assert.Equal(1.0, sum, 9);
            Assert.Equal(maps.Count, unit.GetProperty("classByEpoch").GetArrayLength());
        }
    }

    [Theory]
    [InlineData("--layer", "_scorer.7")]
    [InlineData("--epoch", "999")]
    [InlineData("--method", "layer-activation")]
    [InlineData("--near-zero", "-1")]
    [InlineData("--consistent-share", "0.5")]
    public void NeuronsRefusesBadChoicesWithOneLineAndExitTwo(string option, string value)
    {
        var (code, output, error) = Run("neurons", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--no-chart", option, value);

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Equal("", output);
        Assert.Single(error.Split('\n', StringSplitOptions.RemoveEmptyEntries));
        Assert.StartsWith("error:", error, StringComparison.Ordinal);
    }

    [Fact]
    public void PruneOnTheDemoModelReportsTheUnprunedAccuracyTheTrainingLoopMeasured()
    {
        // The demo's validation rows are written beside the store; the unpruned model at threshold 0.5 must reproduce the
        // validation accuracy the training loop stored for that epoch (logit > 0 is probability > 0.5).
        string data = Path.Combine(_fixture.Folder, ChartFiles.SafePart(DemoStoreFixture.CleanRun) + "-validation.csv");
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var run = store.GetRun(DemoStoreFixture.CleanRun);
        var epoch = store.Epochs(run.Id)[^1];

        var (code, output, error) = Run("prune", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, "--epoch", epoch.Epoch.ToString(System.Globalization.CultureInfo.InvariantCulture), "--data", data, "--seeds", "3", "--json");

        Assert.True(code == ExitCodes.Fine, error);
        using var json = JsonDocument.Parse(output);
        var root = json.RootElement;
        Assert.Equal(1000, root.GetProperty("rows").GetInt32());
        Assert.Equal(10, root.GetProperty("masked").GetInt32()); // 15% of 64 units, rounded
        var choices = root.GetProperty("choices").EnumerateArray().ToList();
        Assert.Equal(["unpruned", "importance-guided", "random", "smallest weights"], choices.Select(c => c.GetProperty("choice").GetString()));
        var unpruned = choices[0];
        Assert.Equal(epoch.Metrics["validation_accuracy"], unpruned.GetProperty("mean").GetProperty("accuracy").GetDouble(), 3);
        var matrix = unpruned.GetProperty("matrices")[0];
        Assert.Equal(1000, matrix.GetProperty("truePositives").GetInt32() + matrix.GetProperty("falsePositives").GetInt32() + matrix.GetProperty("trueNegatives").GetInt32() + matrix.GetProperty("falseNegatives").GetInt32());
        Assert.Equal(3, choices[2].GetProperty("matrices").GetArrayLength());
        foreach (var choice in choices.Skip(1))
        {
            Assert.All(choice.GetProperty("maskedUnits").EnumerateArray(), units => Assert.Equal(10, units.GetArrayLength()));
            double change = choice.GetProperty("change").GetProperty("f1").GetDouble();
            double mean = choice.GetProperty("mean").GetProperty("f1").GetDouble();
            Assert.Equal(mean - unpruned.GetProperty("mean").GetProperty("f1").GetDouble(), change, 12);
        }
    }

    [Theory]
    [InlineData("--fraction", "1")]
    [InlineData("--threshold", "0")]
    [InlineData("--data", "/no/such/rows.csv")]
    [InlineData("--epoch", "999")]
    public void PruneRefusesBadInputWithOneLineAndExitTwo(string option, string value)
    {
        var (code, output, error) = Run("prune", DemoStoreFixture.CleanRun, "--store", _fixture.StorePath, option, value);

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Equal("", output);
        Assert.Single(error.Split('\n', StringSplitOptions.RemoveEmptyEntries));
    }
}
