using DriftWatch.Attribution;
using DriftWatch.Model;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Layers;

public sealed class LayerMethodTests
{
    private static AttributionInput Input(IWatchedModel model, Tensor x, string layer, int chunk = 4096) =>
        new(f => model.Score(f).squeeze(1), x, torch.zeros(x.shape[1]), chunk) { Layer = WatchedLayer.Find(model.Module, layer) };

    private static Tensor Rows(int rows, int columns, long seed)
    {
        torch.manual_seed(seed);
        return torch.randn(rows, columns) * 1.5f + 0.3f;
    }

    [Theory]
    [InlineData("body.1", 4096)]
    [InlineData("body.3", 4096)]
    [InlineData("body.1", 50)]
    public void CompletenessOfLayerConductanceHoldsWithinOnePercentAtDefaultSteps(string layer, int chunk)
    {
        // Dhamdhere, Sundararajan, Yan 2018, "How Important Is a Neuron?", Sec. 3: when every path from the input to the
        // output crosses the layer, the units' conductances sum to F(x) − F(x′). The target is DESIGN.md's: mean per-row
        // gap within 1% of mean |F(x) − F(x′)| at default steps.
        using var scope = torch.NewDisposeScope();
        using var model = StackModel.Mlp(dense: 6, hidden: 24, seed: 11);
        model.eval();
        var x = Rows(64, 6, seed: 5);

        var result = new LayerConductance().Attribute(Input(model, x, layer, chunk));

        Assert.Equal(24, result.Columns);
        double meanGap = 0, meanDelta = 0;
        using (torch.no_grad())
        {
            var expected = (model.Score(x) - model.Score(torch.zeros(1, 6))).squeeze(1).data<float>().ToArray();
            for (int r = 0; r < result.Rows; r++)
            {
                double sum = 0;
                for (int u = 0; u < result.Columns; u++)
                    sum += result.Scores[r * result.Columns + u];
                Assert.Equal(expected[r], result.OutputGaps![r], 4);
                meanGap += Math.Abs(expected[r]) / result.Rows;
                meanDelta += Math.Abs(sum - expected[r]) / result.Rows;
            }
        }
        Assert.True(meanGap > 0.05, $"the rows must move the output for the check to mean anything; mean |gap| {meanGap}");
        Assert.True(meanDelta <= 0.01 * meanGap, $"mean |Σ conductance − (F(x) − F(x′))| = {meanDelta:G4} against mean |gap| {meanGap:G4}");
    }

    [Fact]
    public void NeuronConductanceSummedOverInputsEqualsThatUnitsConductance()
    {
        // Dhamdhere, Sundararajan, Yan 2018, Sec. 3 (neuron conductance): summing a unit's neuron conductance over the
        // inputs gives the unit's conductance, both being the path integral of ∂F/∂y · dy/dα. A smooth model, so both
        // quadratures (midpoint for neuron conductance, trapezoid for the layer) converge well within the tolerance.
        using var scope = torch.NewDisposeScope();
        using var model = StackModel.Smooth(dense: 5, hidden: 12, seed: 3);
        model.eval();
        var x = Rows(16, 5, seed: 8);
        var layer = new LayerConductance(steps: 256).Attribute(Input(model, x, "body.1"));
        double scale = layer.OutputGaps!.Average(g => Math.Abs(g));

        foreach (int unit in new[] { 0, 4, 11 })
        {
            var neuron = new NeuronConductance(unit, steps: 256).Attribute(Input(model, x, "body.1"));
            Assert.Equal(5, neuron.Columns);
            for (int r = 0; r < x.shape[0]; r++)
            {
                double summed = Enumerable.Range(0, 5).Sum(c => (double)neuron.Scores[r * 5 + c]);
                double conductance = layer.Scores[r * 12 + unit];
                Assert.True(Math.Abs(summed - conductance) <= 1e-3 * scale,
                    $"unit {unit}, row {r}: Σ neuron conductance {summed:G5}, layer conductance {conductance:G5} (scale {scale:G3})");
            }
        }
    }

    [Theory]
    [InlineData(1)]
    [InlineData(64)]
    public void LinearLayerInLinearModelHasTheClosedFormOfIntegratedGradientsAtThatLayer(int steps)
    {
        // Sundararajan, Taly, Yan 2017, Eq. 1 applied with the layer as input: for F = v·y + c with y = Wx + b, the
        // gradient ∂F/∂y = v everywhere, so the conductance of unit j is v_j · (y_j(x) − y_j(x′)) exactly, at any step count.
        using var scope = torch.NewDisposeScope();
        torch.manual_seed(21);
        var first = nn.Linear(4, 3);
        var last = nn.Linear(3, 1);
        using var model = new StackModel(4, first, last);
        var x = Rows(5, 4, seed: 2);
        var baseline = torch.tensor(new[] { 0.5f, -1f, 0f, 2f });
        var input = new AttributionInput(f => model.Score(f).squeeze(1), x, baseline, 4096) { Layer = WatchedLayer.Find(model, "body.0") };

        var result = new LayerConductance(steps).Attribute(input);

        using var noGrad = torch.no_grad();
        var v = last.weight!.squeeze(0);
        var expected = ((first.call(x) - first.call(baseline.unsqueeze(0))) * v).data<float>().ToArray();
        for (int i = 0; i < expected.Length; i++)
            Assert.Equal(expected[i], result.Scores[i], 4);
    }

    [Fact]
    public void GradientTimesActivationBeforeTheOutputLayerIsWeightTimesActivation()
    {
        // Chain rule (common practice): the last hidden layer feeds a linear output, so ∂F/∂y_j = v_j and the view is v_j · y_j.
        using var scope = torch.NewDisposeScope();
        using var model = StackModel.Mlp(dense: 3, hidden: 6, seed: 4);
        model.eval();
        var x = Rows(7, 3, seed: 9);
        var input = Input(model, x, "body.3");

        var product = new LayerGradientTimesActivation().Attribute(input);
        var activation = new LayerActivation().Attribute(input);

        var v = ((TorchSharp.Modules.Linear)model.named_modules().First(m => m.name == "body.4").module).weight!.squeeze(0).data<float>().ToArray();
        using var noGrad = torch.no_grad();
        var hidden = torch.nn.functional.relu(((nn.Module<Tensor, Tensor>)model.named_modules().First(m => m.name == "body.2").module)
            .call(torch.nn.functional.relu(((nn.Module<Tensor, Tensor>)model.named_modules().First(m => m.name == "body.0").module).call(x))))
            .data<float>().ToArray();
        for (int i = 0; i < hidden.Length; i++)
        {
            Assert.Equal(hidden[i], activation.Scores[i], 5);
            Assert.Equal(hidden[i] * v[i % 6], product.Scores[i], 5);
        }
    }

    [Fact]
    public void HooksAreRemovedAfterEveryCallEvenWhenTheScoreStepThrows()
    {
        using var scope = torch.NewDisposeScope();
        using var model = StackModel.Mlp(dense: 3, hidden: 5, seed: 1);
        var x = Rows(4, 3, seed: 1);
        var layer = WatchedLayer.Find(model, "body.1");
        Assert.Equal(0, HookCount.Of(layer.Module));

        var input = Input(model, x, "body.1");
        new LayerConductance(4).Attribute(input);
        Assert.Equal(0, HookCount.Of(layer.Module));
        new NeuronConductance(2, 4).Attribute(input);
        new LayerActivation().Attribute(input);
        new LayerGradientTimesActivation().Attribute(input);
        Assert.Equal(0, HookCount.Of(layer.Module));

        // A score step that fails after the layer ran: the hook must still go.
        int seen = -1;
        var failing = input with
        {
            Score = f =>
            {
                model.Score(f);
                seen = HookCount.Of(layer.Module);
                throw new InvalidOperationException("score step failed on purpose");
            },
        };
        Assert.Throws<InvalidOperationException>(() => new LayerConductance(4).Attribute(failing));
        Assert.Equal(1, seen); // it was registered while the score step ran
        Assert.Equal(0, HookCount.Of(layer.Module));
    }

    [Fact]
    public void AnUnknownOrUnusedLayerIsAClearError()
    {
        using var scope = torch.NewDisposeScope();
        using var model = StackModel.Mlp(dense: 3, hidden: 5, seed: 1);
        var x = Rows(4, 3, seed: 1);

        var unknown = Assert.Throws<DriftWatchException>(() => WatchedLayer.Find(model, "body.9"));
        Assert.Contains("no layer 'body.9'", unknown.Message, StringComparison.Ordinal);
        Assert.Contains("body.1", unknown.Message, StringComparison.Ordinal);

        // A score step that bypasses the watched layer.
        var bypass = new AttributionInput(f => f.sum(dim: 1), x, torch.zeros(3), 4096) { Layer = WatchedLayer.Find(model, "body.1") };
        var error = Assert.Throws<DriftWatchException>(() => new LayerConductance(4).Attribute(bypass));
        Assert.Contains("never called layer 'body.1'", error.Message, StringComparison.Ordinal);

        var noLayer = new AttributionInput(f => model.Score(f).squeeze(1), x, torch.zeros(3), 4096);
        Assert.Throws<DriftWatchException>(() => new LayerConductance(4).Attribute(noLayer));
    }
}
