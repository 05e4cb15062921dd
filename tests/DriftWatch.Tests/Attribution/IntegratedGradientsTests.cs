using DriftWatch.Attribution;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Attribution;

public sealed class IntegratedGradientsTests
{
    private static ColumnAttribution Run(IAttributionMethod method, Func<Tensor, Tensor> score, float[,] x, float[]? baseline = null, int chunk = 4096)
    {
        using var scope = torch.NewDisposeScope();
        var inputs = torch.tensor(x);
        var b = baseline is null ? torch.zeros(inputs.shape[1]) : torch.tensor(baseline);
        return method.Attribute(new AttributionInput(score, inputs, b, chunk));
    }

    [Theory]
    [InlineData(1, QuadratureRule.RiemannMidpoint)]
    [InlineData(7, QuadratureRule.RiemannMidpoint)]
    [InlineData(2, QuadratureRule.RiemannTrapezoid)]
    [InlineData(3, QuadratureRule.GaussLegendre)]
    [InlineData(64, QuadratureRule.GaussLegendre)]
    public void LinearModelGetsDifferenceTimesWeightForAnyStepCount(int steps, QuadratureRule rule)
    {
        // Sundararajan, Taly, Yan 2017, Eq. 1: for F(x) = w·x + b the gradient is w everywhere on the path,
        // so IG_i = (x_i − x′_i) · w_i whatever the quadrature (its weights sum to 1).
        var w = new[] { 0.5f, -2f, 3f };
        var weight = torch.tensor(w);
        Tensor Score(Tensor f) => (f * weight).sum(dim: 1) + 0.25f;
        var x = new float[,] { { 1, 2, 3 }, { -1, 0.5f, 4 } };
        var baseline = new[] { 0.5f, 1f, -1f };

        var result = Run(new IntegratedGradients(steps, rule), Score, x, baseline);

        for (int r = 0; r < 2; r++)
        {
            for (int c = 0; c < 3; c++)
                Assert.Equal((x[r, c] - baseline[c]) * w[c], result.Scores[r * 3 + c], 5);
        }
    }

    [Fact]
    public void TwoReluExampleSplitsAsThePaperIllustrates()
    {
        // Sundararajan, Taly, Yan 2017, the two-ReLU illustration (from memory): f(x1, x2) = ReLU(ReLU(x1) − 1 − ReLU(x2))
        // at x = (3, 1), baseline 0, gives IG = (1.5, −0.5), summing to f(x) − f(0) = 1.
        static Tensor Score(Tensor f) => torch.nn.functional.relu(torch.nn.functional.relu(f[.., 0]) - 1 - torch.nn.functional.relu(f[.., 1]));

        var result = Run(new IntegratedGradients(64), Score, new float[,] { { 3, 1 } });

        Assert.Equal(1.5, result.Scores[0], 5);
        Assert.Equal(-0.5, result.Scores[1], 5);
        Assert.Equal(1.0, result.OutputGaps![0], 5);
    }

    [Fact]
    public void GaussLegendreIsExactForPolynomialModelsWhereMidpointIsNot()
    {
        // Abramowitz & Stegun, Handbook of Mathematical Functions, §25.4 (Gaussian integration; section from memory):
        // n nodes integrate polynomials of degree 2n − 1 exactly. For F = x1³·x2 the path gradient is cubic in α, so 2 nodes suffice:
        // IG1 = ¾·x1³·x2, IG2 = ¼·x1³·x2 (baseline 0).
        static Tensor Score(Tensor f) => f[.., 0].pow(3) * f[.., 1];
        var x = new float[,] { { 1.5f, -2f } };
        double full = Math.Pow(1.5, 3) * -2;

        var gauss = Run(new IntegratedGradients(2, QuadratureRule.GaussLegendre), Score, x);
        var midpoint = Run(new IntegratedGradients(2, QuadratureRule.RiemannMidpoint), Score, x);

        Assert.Equal(0.75 * full, gauss.Scores[0], 5);
        Assert.Equal(0.25 * full, gauss.Scores[1], 5);
        Assert.True(Math.Abs(midpoint.Scores[0] - 0.75 * full) > 0.05, $"midpoint with 2 steps gave {midpoint.Scores[0]}, unexpectedly exact");
    }

    [Fact]
    public void ChunkedAndUnchunkedAgreeTo1e5()
    {
        using var model = new SmallNet(dense: 3, levels: 5, width: 4);
        model.eval();
        var rows = new RowsBuilder().WithRows(37).Build();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.tensor(rows.Dense, [37, 3]), torch.tensor(rows.Categorical, [37, 1])).detach();
        Tensor Score(Tensor f) => model.Score(f).squeeze(1);
        var method = new IntegratedGradients(16);

        var whole = method.Attribute(new AttributionInput(Score, features, torch.zeros(7), 1 << 20));
        var chunked = method.Attribute(new AttributionInput(Score, features, torch.zeros(7), 5)); // 5 does not divide 16 steps: chunks cut rows' paths
        var blocks = method.Attribute(new AttributionInput(Score, features, torch.zeros(7), 80)); // whole rows, 5 a chunk, the last chunk short
        var rowBaselines = torch.zeros(37, 7);
        var wholeOwnBaselines = method.Attribute(new AttributionInput(Score, features, rowBaselines, 1 << 20));
        var blocksOwnBaselines = method.Attribute(new AttributionInput(Score, features, rowBaselines, 80));

        for (int i = 0; i < whole.Scores.Length; i++)
        {
            Assert.Equal(whole.Scores[i], chunked.Scores[i], 1e-5);
            Assert.Equal(whole.Scores[i], blocks.Scores[i], 1e-5);
            Assert.Equal(whole.Scores[i], wholeOwnBaselines.Scores[i], 1e-5);
            Assert.Equal(whole.Scores[i], blocksOwnBaselines.Scores[i], 1e-5);
        }
        Assert.Equal(37L * 16 + 37 + 1, whole.Evaluations); // steps × rows, F(x) per row, F(x′) once for the shared baseline
    }

    [Fact]
    public void CompletenessHoldsWithinOnePercentAtDefaultSteps()
    {
        // Sundararajan, Taly, Yan 2017, Prop. 1 (completeness): Σ_i IG_i(x) = F(x) − F(x′).
        using var model = new SmallNet(dense: 3, levels: 5, width: 4, hidden: 32);
        model.eval();
        var rows = new RowsBuilder().WithRows(64).Build();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.tensor(rows.Dense, [64, 3]), torch.tensor(rows.Categorical, [64, 1])).detach();

        var columns = new IntegratedGradients().Attribute(new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(7), 8192));
        var map = AttributionMap.FromColumns(columns, model.Schema);

        Assert.Equal(64, map.Deltas!.Length); // every row's gap is recorded
        Assert.True(map.RelativeMeanDelta() < 0.01, $"mean gap was {map.RelativeMeanDelta():P2} of mean |F(x) − F(0)|");
    }

    [Fact]
    public void GradientTimesInputAndSaliencyMatchTheGradientForAQuadratic()
    {
        // Simonyan, Vedaldi, Zisserman 2014 (saliency = |∂F/∂x|); gradient × input as commonly defined (common practice).
        // F = x1² − 3·x2: ∂F/∂x = (2·x1, −3).
        static Tensor Score(Tensor f) => f[.., 0].pow(2) - 3 * f[.., 1];
        var x = new float[,] { { 2, 5 } };

        var gxi = Run(new GradientTimesInput(), Score, x);
        var saliency = Run(new Saliency(), Score, x);

        Assert.Equal(new[] { 8f, -15f }, gxi.Scores);
        Assert.Equal(new[] { 4f, 3f }, saliency.Scores);
    }
}
