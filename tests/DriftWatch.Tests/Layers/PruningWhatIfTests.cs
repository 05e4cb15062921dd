using DriftWatch.Layers;
using DriftWatch.Model;
using DriftWatch.Probing;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Layers;

public sealed class PruningWhatIfTests
{
    private static ProbeRows Rows(Tensor x, float[] labels) =>
        new(x.contiguous().data<float>().ToArray(), (int)x.shape[1], [], 0, labels);

    [Fact]
    public void ConfusionMatrixFiguresMatchAHandCount()
    {
        // Worked by hand with the usual definitions (Fawcett 2006, "An introduction to ROC analysis", Fig. 1):
        // predictions at 0.5 are 1, 0, 1, 0, 1 against labels 1, 0, 0, 1, 1: TP 2 (rows 1, 5), FP 1 (row 3), TN 1 (row 2),
        // FN 1 (row 4); precision 2/3, recall 2/3, F1 2/3, accuracy 3/5.
        var matrix = ConfusionMatrix.Count([0.9f, 0.2f, 0.6f, 0.4f, 0.7f], [1f, 0f, 0f, 1f, 1f], 0.5);

        Assert.Equal(new ConfusionMatrix(2, 1, 1, 1), matrix);
        Assert.Equal(2.0 / 3, matrix.Precision, 12);
        Assert.Equal(2.0 / 3, matrix.Recall, 12);
        Assert.Equal(2.0 / 3, matrix.F1, 12);
        Assert.Equal(0.6, matrix.Accuracy, 12);

        // At threshold 0.65 rows 1 and 5 stay positive: TP 2, FP 0, TN 2, FN 1; precision 1, recall 2/3, F1 0.8.
        var stricter = ConfusionMatrix.Count([0.9f, 0.2f, 0.6f, 0.4f, 0.7f], [1f, 0f, 0f, 1f, 1f], 0.65);
        Assert.Equal(new ConfusionMatrix(2, 0, 2, 1), stricter);
        Assert.Equal(0.8, stricter.F1, 12);
        Assert.Throws<DriftWatchException>(() => ConfusionMatrix.Count([0.5f], [2f], 0.5));
    }

    [Fact]
    public void MaskingAUnitWithZeroOutgoingWeightChangesNothing()
    {
        // Common practice (the chain rule): a unit whose outgoing weights are all zero cannot reach the output.
        using var scope = torch.NewDisposeScope();
        using var model = StackModel.Mlp(dense: 4, hidden: 8, seed: 7);
        var next = (TorchSharp.Modules.Linear)model.named_modules().First(m => m.name == "body.2").module;
        using (torch.no_grad())
            next.weight![.., 3] = torch.zeros(8);
        torch.manual_seed(3);
        var x = torch.randn(50, 4);
        var rows = Rows(x, new float[50]);
        var layer = WatchedLayer.Find(model, "body.1");

        var before = PruningWhatIf.Probabilities(model, layer, rows, AttributionTarget.Logit, [], 4096);
        var masked = PruningWhatIf.Probabilities(model, layer, rows, AttributionTarget.Logit, [3], 4096);
        var other = PruningWhatIf.Probabilities(model, layer, rows, AttributionTarget.Logit, [0, 1, 2, 4, 5], 4096);

        Assert.Equal(0f, next.weight!.select(1, 3).abs().sum().item<float>());
        // Equal up to float rounding: libtorch may sum a matrix product in another order from one call to the next.
        double unchanged = before.Zip(masked).Max(p => Math.Abs(p.First - p.Second));
        double moved = before.Zip(other).Max(p => Math.Abs(p.First - p.Second));
        Assert.True(unchanged < 1e-6, $"largest difference {unchanged}");
        Assert.True(moved > 1e-3, $"largest difference {moved}"); // the same check can fail: masking units that do reach the output moves it
        Assert.Equal(0, HookCount.Of(layer.Module));
    }

    [Fact]
    public void OrdersPutConsistentlyNegativeUnitsFirstAndSmallWeightsFirst()
    {
        UnitFigures Unit(int u, NeuronClass c, double mean, double absolute) => new(u, 0, 0, 0, mean, absolute, c);
        var figures = new[]
        {
            Unit(0, NeuronClass.Positive, 0.5, 0.5),
            Unit(1, NeuronClass.ConsistentlyNegative, -0.1, 0.1),
            Unit(2, NeuronClass.Inactive, 0, 0.001),
            Unit(3, NeuronClass.ConsistentlyNegative, -0.4, 0.4),
            Unit(4, NeuronClass.Mixed, 0.01, 0.2),
        };

        Assert.Equal([3, 1, 2, 4, 0], PruningWhatIf.ImportanceOrder(figures));
        Assert.Equal([2, 0, 1], PruningWhatIf.WeightOrder([0.5, 0.7, 0.1]));
        var draw = PruningWhatIf.RandomChoice(20, 5, seed: 4);
        Assert.Equal(5, draw.Distinct().Count());
        Assert.Equal(draw, PruningWhatIf.RandomChoice(20, 5, seed: 4));
        Assert.Equal(2, new PruningOptions { Fraction = 0.15 }.MaskedOf(10));
        Assert.Equal(1, new PruningOptions { Fraction = 0.01 }.MaskedOf(10));
    }

    [Fact]
    public void TheWhatIfMasksTheConsistentlyNegativeUnitAndReportsChangesAgainstTheUnpruned()
    {
        using var scope = torch.NewDisposeScope();
        using var model = NeuronAuditTests.BuiltModel();
        var x = NeuronAuditTests.BuiltRows(30, 5);
        // Labels: the model predicts every row positive; make the last ten negatives so the unpruned model has false positives.
        var labels = Enumerable.Range(0, 30).Select(i => i < 20 ? 1f : 0f).ToArray();
        var rows = Rows(x, labels);
        var layer = WatchedLayer.Find(model, "body.1");
        var importance = new[]
        {
            new UnitFigures(0, 0, 1, 0, -0.4, 0.4, NeuronClass.ConsistentlyNegative),
            new UnitFigures(1, 1, 0, 0, 3.5, 3.5, NeuronClass.Positive),
            new UnitFigures(2, 0, 0, 1, 0, 0, NeuronClass.Inactive),
        };

        var report = PruningWhatIf.Run(model, layer, rows, AttributionTarget.Logit, importance, new PruningOptions { Fraction = 0.3, Seeds = 3 });

        Assert.Equal(1, report.Masked);
        Assert.Equal(new ConfusionMatrix(20, 10, 0, 0), report.Unpruned.Matrices[0]);
        var guided = report.Choices[0];
        Assert.Equal(PruningChoice.ImportanceGuided, guided.Choice);
        Assert.Equal([0], guided.MaskedUnits[0]);
        // Masking unit 0 only raises the logit further: the matrix stays the same and every change is 0.
        Assert.Equal(new ConfusionMatrix(20, 10, 0, 0), guided.Matrices[0]);
        Assert.Equal(new MetricSet(0, 0, 0, 0), guided.Change);
        var random = report.Choices[1];
        Assert.Equal(3, random.Matrices.Count);
        Assert.Equal(random.Matrices.Average(m => m.Accuracy), random.Mean.Accuracy, 12);
        Assert.Equal(random.Mean.Accuracy - report.Unpruned.Mean.Accuracy, random.Change.Accuracy, 12);
        // Smallest incoming weights: unit 2 has none (L1 norm 0), then unit 0 (1 + 0) before unit 1 (0 + 3).
        Assert.Equal([2], report.Choices[2].MaskedUnits[0]);
        Assert.Equal("body.0.weight", report.WeightSource);
        Assert.Equal(0, HookCount.Of(layer.Module));
    }
}
