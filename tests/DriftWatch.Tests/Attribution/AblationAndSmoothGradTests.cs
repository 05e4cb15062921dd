using DriftWatch.Attribution;
using DriftWatch.Model;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Attribution;

public sealed class AblationAndSmoothGradTests
{
    private static readonly FeatureSchema DenseAndGroup = FeatureSchema.CreateBuilder()
        .AddDense("a").AddCategorical("group", 3).AddDense("b").Build();

    [Theory]
    [InlineData(1, 4096)]
    [InlineData(3, 4096)]
    [InlineData(2, 5)]
    public void AblationOfALinearModelIsDifferenceTimesWeightPerFeature(int featuresPerPass, int chunk)
    {
        // For F(x) = w·x + b, F(x) − F(x with feature j at x′_j) = Σ_{c ∈ j} w_c (x_c − x′_c) (occlusion of a linear
        // model, common practice); the categorical's three columns are replaced together.
        float[] w = [0.5f, -2f, 1f, 3f, -1.5f];
        var weight = torch.tensor(w);
        Tensor Score(Tensor f) => (f * weight).sum(dim: 1) + 0.25f;
        float[,] x = { { 1, 2, 3, -1, 4 }, { -1, 0.5f, 2, 2, -3 }, { 0, 0, 1, 1, 1 } };
        float[] baseline = [0.5f, 1, -1, 0, 2];
        using var scope = torch.NewDisposeScope();
        var input = new AttributionInput(Score, torch.tensor(x), torch.tensor(baseline), chunk).WithSchema(DenseAndGroup);

        var map = AttributionMap.FromColumns(new FeatureAblation(featuresPerPass).Attribute(input), DenseAndGroup);

        for (int r = 0; r < 3; r++)
        {
            Assert.Equal((x[r, 0] - baseline[0]) * w[0], map[r, 0], 5);
            Assert.Equal(Enumerable.Range(1, 3).Sum(c => (x[r, c] - baseline[c]) * w[c]), map[r, 1], 5);
            Assert.Equal((x[r, 4] - baseline[4]) * w[4], map[r, 2], 5);
        }
        Assert.Null(map.OutputGaps); // ablation makes no completeness claim
    }

    [Fact]
    public void AblationOfAMaximumCreditsOnlyTheLargerFeature()
    {
        // Occlusion (Zeiler and Fergus 2014): a feature's score is the output change when it is removed. For F = max(x1, x2)
        // at (3, 1) with baseline 0: F(3, 1) − F(0, 1) = 2 and F(3, 1) − F(3, 0) = 0.
        static Tensor Score(Tensor f) => torch.maximum(f[.., 0], f[.., 1]);
        using var scope = torch.NewDisposeScope();
        var input = new AttributionInput(Score, torch.tensor(new float[,] { { 3, 1 } }), torch.zeros(2), 16);

        var ablation = new FeatureAblation().Attribute(input);

        Assert.Equal(new[] { 2f, 0f }, ablation.Scores);
        Assert.Equal(1L + 2, ablation.Evaluations); // F(x) once, then one ablated copy per feature
    }

    [Fact]
    public void SmoothGradWithoutNoiseIsThePlainGradient()
    {
        // Smilkov et al. 2017: SmoothGrad averages ∂F/∂x over x + N(0, σ²); as σ → 0 every copy is x itself.
        using var model = new SmallNet(dense: 3, levels: 5, width: 4, hidden: 16);
        model.eval();
        var rows = new RowsBuilder().WithRows(12).Build();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.tensor(rows.Dense, [12, 3]), torch.tensor(rows.Categorical, [12, 1])).detach();
        Tensor Score(Tensor f) => model.Score(f).squeeze(1);
        var leaf = features.clone().requires_grad_(true);
        var gradient = torch.autograd.grad([Score(leaf).sum()], [leaf])[0].contiguous().data<float>().ToArray();
        var input = new AttributionInput(Score, features, torch.zeros(7), 9);

        var none = new SmoothGrad(samples: 5, noiseFraction: 0).Attribute(input);
        var tiny = new SmoothGrad(samples: 5, noiseFraction: 1e-6).Attribute(input);
        var times = new SmoothGrad(samples: 5, noiseFraction: 0, variant: SmoothGradVariant.GradientTimesInput).Attribute(input);
        var plainTimes = new GradientTimesInput().Attribute(input);

        for (int i = 0; i < gradient.Length; i++)
        {
            Assert.Equal(gradient[i], none.Scores[i], 1e-6);
            Assert.Equal(gradient[i], tiny.Scores[i], 1e-4);
            Assert.Equal(plainTimes.Scores[i], times.Scores[i], 1e-6);
        }
    }

    [Fact]
    public void SmoothGradOfACubeAddsThreeSigmaSquared()
    {
        // F(x) = x³: E[F′(x + ε)] = 3x² + 3σ² for ε ~ N(0, σ²) (Gaussian second moment, common practice), the bias
        // SmoothGrad (Smilkov et al. 2017) adds to a curved model. Rows span [−1, 1], so σ = 0.15 × 2 = 0.3.
        static Tensor Score(Tensor f) => f[.., 0].pow(3);
        using var scope = torch.NewDisposeScope();
        var input = new AttributionInput(Score, torch.tensor(new float[,] { { -1 }, { 0 }, { 1 } }), torch.zeros(1), 1000);

        var result = new SmoothGrad(samples: 4000, noiseFraction: 0.15, seed: 3).Attribute(input);

        Assert.Equal(3 + 3 * 0.09, result.Scores[2], 0.1);
        Assert.Equal(3 * 0.09, result.Scores[1], 0.05);
        Assert.Equal(3 + 3 * 0.09, result.Scores[0], 0.1);
        Assert.Equal(3L * 4000, result.Evaluations);
    }

    [Fact]
    public void SmoothGradDoesNotDependOnTheChunkSize()
    {
        using var model = new SmallNet(dense: 3, levels: 5, width: 4);
        model.eval();
        var rows = new RowsBuilder().WithRows(11).Build();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.tensor(rows.Dense, [11, 3]), torch.tensor(rows.Categorical, [11, 1])).detach();
        var method = new SmoothGrad(samples: 7, seed: 4);

        var whole = method.Attribute(new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(7), 1 << 20));
        var chunked = method.Attribute(new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(7), 6));

        for (int i = 0; i < whole.Scores.Length; i++)
            Assert.Equal(whole.Scores[i], chunked.Scores[i], 1e-6);
    }

    [Fact]
    public void MethodsAreRebuiltFromTheirStoredSettings()
    {
        IAttributionMethod[] methods =
        [
            new IntegratedGradients(24, QuadratureRule.GaussLegendre),
            new FeatureAblation(5),
            new ShapleySampling(10, antithetic: false, seed: 3),
            new ExactShapley(),
            new SmoothGrad(20, 0.1, SmoothGradVariant.GradientTimesInput, seed: 8),
            new Saliency(),
        ];
        foreach (var method in methods)
        {
            var rebuilt = AttributionMethods.Create(method.Name, method.Settings);
            Assert.Equal(method.Name, rebuilt.Name);
            Assert.Equal(method.Settings, rebuilt.Settings);
        }

        var unknown = Assert.Throws<DriftWatchException>(() => AttributionMethods.Create("smoothgrad", new Dictionary<string, string> { ["sigma"] = "0.1" }));
        Assert.Contains("has no setting 'sigma'; its settings: noise, samples, seed", unknown.Message);
        var bad = Assert.Throws<DriftWatchException>(() => AttributionMethods.Create("integrated-gradients", new Dictionary<string, string> { ["steps"] = "0" }));
        Assert.Contains("setting 'steps' must be a whole number between 1 and 4096; got '0'", bad.Message);
        Assert.Throws<DriftWatchException>(() => AttributionMethods.Create("lime", new Dictionary<string, string>()));
    }
}
