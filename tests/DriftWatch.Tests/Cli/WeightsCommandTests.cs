using DriftWatch.Attribution;
using DriftWatch.Cli;
using DriftWatch.Hooks;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;

namespace DriftWatch.Tests.Cli;

public sealed class WeightsCommandTests
{
    // Validation losses by epoch: the lowest (the best epoch) is epoch 1, the last epoch is 3.
    private static readonly double[] ValidationLosses = [0.9, 0.5, 0.7, 0.8];

    private sealed record TrainedRun(string Store, float[][] OutputsByEpoch, ProbeRows Rows);

    // Trains the tests' small network four epochs under the monitor (snapshots on) and keeps its outputs on fixed rows after each.
    private static TrainedRun Train(TempFolder temp, bool snapshots = true)
    {
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        var data = new RowsBuilder().WithRows(80).WithSeed(3).Build();
        var rows = new RowsBuilder().WithRows(20).WithSeed(9).Build();
        var optimizer = new DriftWatch.Hooks.Optimizers.Adam(model.parameters(), 0.05);
        var outputs = new float[ValidationLosses.Length][];
        using (var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = store,
            RunName = "small",
            Schema = model.Schema,
            Probe = TestProbes.Small(),
            Methods = [new IntegratedGradients(8)],
            SaveSnapshots = snapshots,
        }))
        {
            for (int epoch = 0; epoch < ValidationLosses.Length; epoch++)
            {
                using (var scope = torch.NewDisposeScope())
                {
                    model.train();
                    optimizer.zero_grad();
                    var logits = model.call(torch.tensor(data.Dense, [data.Count, data.DenseCount]), torch.tensor(data.Categorical, [data.Count, 1])).squeeze(1);
                    torch.nn.functional.binary_cross_entropy_with_logits(logits, torch.tensor(data.Labels!)).backward();
                    optimizer.step();
                }
                outputs[epoch] = Outputs(model, rows);
                monitor.EndEpoch(model, epoch, new EpochMetrics(0.6, ValidationLosses[epoch]));
            }
        }
        return new TrainedRun(store, outputs, rows);
    }

    private static float[] Outputs(SmallNet model, ProbeRows rows)
    {
        using var scope = torch.NewDisposeScope();
        model.eval();
        using var no = torch.no_grad();
        return model.call(torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]), torch.tensor(rows.Categorical, [rows.Count, 1])).data<float>().ToArray();
    }

    private static float[] OutputsOfFile(string path, ProbeRows rows)
    {
        using var fresh = new SmallNet(3, 5, 4, seed: 77); // other initial weights: everything that matches comes from the file
        fresh.load(path);
        return Outputs(fresh, rows);
    }

    private static (int Code, string Output, string Error) Cli(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    [Fact]
    public void TheBestEpochsWeightsFileReproducesTheModelsOutputsBitForBit()
    {
        using var temp = new TempFolder();
        var run = Train(temp);
        string file = temp.File("best.weights");

        var (code, output, error) = Cli("weights", "small", "--epoch", "best", "--out", file, "--store", run.Store);

        Assert.True(code == ExitCodes.Fine, error);
        Assert.Contains("epoch 1, lowest validation loss", output, StringComparison.Ordinal);
        var reproduced = OutputsOfFile(file, run.Rows);
        // Bit for bit: the same float32 patterns as the trained model gave at epoch 1, and not those of any later epoch.
        Assert.Equal(run.OutputsByEpoch[1].Select(BitConverter.SingleToInt32Bits), reproduced.Select(BitConverter.SingleToInt32Bits));
        Assert.NotEqual(run.OutputsByEpoch[3].Select(BitConverter.SingleToInt32Bits), reproduced.Select(BitConverter.SingleToInt32Bits));
    }

    [Fact]
    public void TheApiWritesTheLastAndANumberedEpoch()
    {
        using var temp = new TempFolder();
        var run = Train(temp);
        using var store = RunStore.OpenForReading(run.Store);

        var last = RunSnapshots.Write(store, "small", "last", temp.File("last.weights"));
        var second = RunSnapshots.Write(store, "small", "2", temp.File("two.weights"));

        Assert.Equal((3, SnapshotFormat.Weights, "latest with a snapshot"), (last.Epoch, last.Format, last.Why));
        Assert.Equal(0.7, second.ValidationLoss);
        Assert.Equal(run.OutputsByEpoch[3], OutputsOfFile(temp.File("last.weights"), run.Rows));
        Assert.Equal(run.OutputsByEpoch[2], OutputsOfFile(temp.File("two.weights"), run.Rows));
    }

    [Theory]
    [InlineData("9", "has no stored epoch 9")]
    [InlineData("soon", "--epoch must be best, last or an epoch number; got 'soon'")]
    public void ABadEpochIsOneLineAndExitTwoAndWritesNothing(string epoch, string said)
    {
        using var temp = new TempFolder();
        var run = Train(temp);
        string file = temp.File("never.weights");

        var (code, _, error) = Cli("weights", "small", "--epoch", epoch, "--out", file, "--store", run.Store);

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Single(error.TrimEnd().Split('\n'));
        Assert.Contains(said, error, StringComparison.Ordinal);
        Assert.False(File.Exists(file));
    }

    [Fact]
    public void ARunWithoutSnapshotsIsOneLineAndExitTwo()
    {
        using var temp = new TempFolder();
        var run = Train(temp, snapshots: false);

        var (code, _, error) = Cli("weights", "small", "--out", temp.File("never.weights"), "--store", run.Store);

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Single(error.TrimEnd().Split('\n'));
        Assert.Contains("kept no weight snapshots", error, StringComparison.Ordinal);
    }

    [Fact]
    public void CheckNamesTheCommandThatWritesTheBestEpochsWeights()
    {
        using var temp = new TempFolder();
        var run = Train(temp);

        var (_, output, _) = Cli("check", "small", "--json", "--store", run.Store);

        using var document = System.Text.Json.JsonDocument.Parse(output);
        Assert.Equal(1, document.RootElement.GetProperty("best_epoch").GetInt32());
        Assert.Equal("driftwatch weights small --epoch best --out small-best.weights", document.RootElement.GetProperty("weights_command").GetString());
    }
}
