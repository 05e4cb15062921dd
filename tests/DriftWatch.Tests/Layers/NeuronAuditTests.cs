using DriftWatch.Attribution;
using DriftWatch.Layers;
using DriftWatch.Model;
using DriftWatch.Storage;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Layers;

public sealed class NeuronAuditTests
{
    /// <summary>
    /// Two inputs, three hidden ReLU units, one logit, weights set by hand: unit 0 = ReLU(x0 + 1) feeds the logit with −0.5,
    /// unit 1 = ReLU(3·x1 + 1) with +1, unit 2 has no weights at all. On rows with x0 in [0.5, 1] and x1 in [1, 2] the logit
    /// is at least 3, so every row is predicted positive and unit 0 always pushes against that prediction.
    /// </summary>
    internal static StackModel BuiltModel()
    {
        var first = nn.Linear(2, 3);
        var last = nn.Linear(3, 1);
        using (torch.no_grad())
        {
            first.weight!.copy_(torch.tensor(new float[,] { { 1, 0 }, { 0, 3 }, { 0, 0 } }));
            first.bias!.copy_(torch.tensor(new float[] { 1, 1, 0 }));
            last.weight!.copy_(torch.tensor(new float[,] { { -0.5f, 1, 0 } }));
            last.bias!.zero_();
        }
        return new StackModel(2, first, nn.ReLU(), last);
    }

    internal static Tensor BuiltRows(int rows, long seed)
    {
        torch.manual_seed(seed);
        return torch.cat([torch.rand(rows, 1) * 0.5f + 0.5f, torch.rand(rows, 1) + 1], 1);
    }

    private static LayerMapDocument Map(StackModel model, Tensor x, int epoch)
    {
        var input = new AttributionInput(f => model.Score(f).squeeze(1), x, torch.zeros(2), 4096) { Layer = WatchedLayer.Find(model, "body.1") };
        return LayerMaps.Attribute(new LayerConductance(16), input, LayerMaps.Outputs(input), runId: 1, epoch, "logit");
    }

    [Fact]
    public void AUnitBuiltToAlwaysPushAgainstThePredictionIsConsistentlyNegative()
    {
        // By construction (see BuiltModel): unit 0's conductance is −0.5 · (y0(x) − y0(0)) = −0.5 · x0 < 0 on every row, the
        // closed form for a unit feeding the output linearly (Dhamdhere, Sundararajan, Yan 2018); unit 2 carries nothing.
        using var scope = torch.NewDisposeScope();
        using var model = BuiltModel();
        var maps = new[] { Map(model, BuiltRows(40, 1), 1), Map(model, BuiltRows(40, 2), 2) };

        var audit = NeuronAudit.Run(maps, "logit", new NeuronAuditOptions());

        Assert.Equal(NeuronClass.ConsistentlyNegative, audit.Overall[0].Class);
        Assert.Equal(1.0, audit.Overall[0].Negative, 6);
        Assert.True(audit.Overall[0].MeanConductance < -0.25, $"mean {audit.Overall[0].MeanConductance}");
        Assert.Equal(NeuronClass.Positive, audit.Overall[1].Class);
        Assert.Equal(NeuronClass.Inactive, audit.Overall[2].Class);
        Assert.Equal(1.0, audit.Overall[2].NearZero, 6);
        Assert.All(audit.ByEpoch, epoch => Assert.Equal(NeuronClass.ConsistentlyNegative, epoch[0].Class));
        Assert.Empty(audit.Changes);
        Assert.Equal(1, audit.Count(NeuronClass.ConsistentlyNegative));

        // With raw signs the same unit still lowers the logit on every row.
        var raw = NeuronAudit.Run(maps, "logit", new NeuronAuditOptions { TowardPrediction = false });
        Assert.Equal(NeuronClass.ConsistentlyNegative, raw.Overall[0].Class);
    }

    [Fact]
    public void SignsAreReadTowardThePredictedClass()
    {
        // A unit that raises the logit on rows predicted negative works against the prediction there.
        var map = new LayerMapDocument
        {
            RunId = 1,
            Epoch = 3,
            Layer = "h",
            Method = "layer-conductance",
            Target = "logit",
            Rows = 4,
            Units = 2,
            Scores = FloatBytes.FromFloats([0.5f, 0.5f, 0.5f, 0.5f, 0.5f, -0.5f, 0.5f, -0.5f]),
            Outputs = FloatBytes.FromFloats([2f, 1f, -1f, -3f]),
        };

        var audit = NeuronAudit.Run([map], "logit", new NeuronAuditOptions());

        // Unit 0 is +0.5 everywhere: for on the two positive rows, against on the two negative ones.
        Assert.Equal(0.5, audit.Overall[0].Positive, 6);
        Assert.Equal(NeuronClass.Mixed, audit.Overall[0].Class);
        // Unit 1 is +0.5 on positive rows and −0.5 on negative rows: for the prediction on every row.
        Assert.Equal(1.0, audit.Overall[1].Positive, 6);
        Assert.Equal(NeuronClass.Positive, audit.Overall[1].Class);
    }

    [Theory]
    [InlineData(0.05, 0.80, 0.15, NeuronClass.ConsistentlyNegative)]
    [InlineData(0.00, 0.05, 0.95, NeuronClass.Inactive)]
    [InlineData(0.45, 0.45, 0.10, NeuronClass.Mixed)]
    [InlineData(0.60, 0.20, 0.20, NeuronClass.Mixed)]
    [InlineData(0.85, 0.05, 0.10, NeuronClass.Positive)]
    public void ClassesFollowTheThresholds(double positive, double negative, double zero, NeuronClass expected)
    {
        Assert.Equal(expected, NeuronAudit.Classify(positive, negative, zero, new NeuronAuditOptions()));
    }

    [Fact]
    public void ClassChangesAreListedWithTheEpochOfTheNewClass()
    {
        static LayerMapDocument Map(int epoch, float unit0) => new()
        {
            RunId = 1,
            Epoch = epoch,
            Layer = "h",
            Method = "layer-conductance",
            Target = "regression",
            Rows = 2,
            Units = 2,
            Scores = FloatBytes.FromFloats([unit0, 1f, unit0, 1f]),
            Outputs = FloatBytes.FromFloats([0f, 0f]),
        };

        var audit = NeuronAudit.Run([Map(1, 1f), Map(2, -1f), Map(4, -1f), Map(5, 0f)], "regression", new NeuronAuditOptions());

        Assert.Equal([1, 2, 4, 5], audit.Epochs);
        Assert.Equal(
            [new ClassChange(0, 2, NeuronClass.Positive, NeuronClass.ConsistentlyNegative), new ClassChange(0, 5, NeuronClass.ConsistentlyNegative, NeuronClass.Inactive)],
            audit.Changes);
    }

    [Theory]
    [InlineData(-0.1, 0.9, 0.8)]
    [InlineData(0.1, 0, 0.8)]
    [InlineData(0.1, 0.9, 0.5)]
    public void BadThresholdsAreRefused(double nearZero, double inactive, double consistent)
    {
        var options = new NeuronAuditOptions { NearZero = nearZero, InactiveShare = inactive, ConsistentShare = consistent };
        Assert.Throws<DriftWatchException>(options.Validate);
    }
}
