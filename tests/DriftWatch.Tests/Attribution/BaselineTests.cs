using DriftWatch.Attribution;
using TorchSharp;
using Xunit;

namespace DriftWatch.Tests.Attribution;

public sealed class BaselineTests
{
    [Fact]
    public void TrainingMeanIsTheColumnMeanOfTheTrainingHalf()
    {
        using var scope = torch.NewDisposeScope();
        var training = torch.tensor(new float[,] { { 1, 10 }, { 3, 20 }, { 5, 60 } });

        var mean = Baseline.TrainingMean.Resolve(training, 2).data<float>().ToArray();

        Assert.Equal(new[] { 3f, 30f }, mean);
    }

    [Fact]
    public void AGivenBaselineIsUsedAsGivenAndCheckedForWidth()
    {
        using var scope = torch.NewDisposeScope();
        var training = torch.zeros(4, 3);

        Assert.Equal(new[] { 0.5f, -1f, 2f }, Baseline.FromValues([0.5f, -1f, 2f]).Resolve(training, 3).data<float>().ToArray());
        var e = Assert.Throws<DriftWatchException>(() => Baseline.FromValues([1f, 2f]).Resolve(training, 3));
        Assert.Contains("2 values but feature space has 3 columns", e.Message);
    }

    [Fact]
    public void CompletenessHoldsFromANonZeroBaseline()
    {
        // Sundararajan, Taly, Yan 2017, Prop. 1: Σ IG = F(x) − F(x′) for any baseline x′.
        using var scope = torch.NewDisposeScope();
        static torch.Tensor Score(torch.Tensor f) => (f[.., 0] * f[.., 1]).tanh() + f[.., 1].pow(2);
        var inputs = torch.tensor(new float[,] { { 1.5f, -0.5f }, { 0.2f, 2f } });
        var baseline = Baseline.TrainingMean.Resolve(inputs, 2);

        var result = new IntegratedGradients(128).Attribute(new AttributionInput(Score, inputs, baseline, 4096));

        for (int r = 0; r < 2; r++)
            Assert.Equal(result.OutputGaps![r], result.Scores[r * 2] + result.Scores[r * 2 + 1], 3);
        Assert.NotEqual(0f, result.OutputGaps![0]);
    }
}
