using DriftWatch.Attribution;
using DriftWatch.Model;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Attribution;

public sealed class MapQualityTests
{
    private static readonly FeatureSchema Schema = FeatureSchema.CreateBuilder()
        .AddDense("a").AddDense("b").AddCategorical("group", 2).Build();

    private static readonly float[] Weights = [1.5f, -2f, 0.5f, 3f];

    private static Tensor Linear(Tensor f) => (f * torch.tensor(Weights)).sum(dim: 1) - 0.5f;

    private static (QualityFigures Figures, ColumnAttribution Map) Measure(IAttributionMethod method, Func<Tensor, Tensor> score, QualityOptions? options = null)
    {
        var random = new Random(5);
        var x = new float[20, 4];
        for (int r = 0; r < 20; r++)
        {
            for (int c = 0; c < 4; c++)
                x[r, c] = (float)(random.NextDouble() * 4 - 2);
        }
        using var scope = torch.NewDisposeScope();
        var input = new AttributionInput(score, torch.tensor(x), torch.tensor(new[] { 0.2f, -0.1f, 0.3f, 0f }), 13).WithSchema(Schema);
        var map = method.Attribute(input);
        return (MapQuality.Measure(method, input, map, options ?? new QualityOptions { SampleRows = 12 }), map);
    }

    [Fact]
    public void GradientTimesInputOfALinearModelHasZeroInfidelity()
    {
        // Yeh, Hsieh, Suggala, Inouye, Ravikumar 2019: infidelity E[(IᵀΦ − (f(x) − f(x − I)))²] is 0 when the explanation
        // predicts every perturbation's effect; for a linear f, gradient × input does so for the matching perturbation
        // I = s ⊙ (x − x′) (whole features set to the baseline).
        var (gradientTimesInput, _) = Measure(new GradientTimesInput(), Linear);
        var (integrated, _) = Measure(new IntegratedGradients(4), Linear);
        var (saliency, _) = Measure(new Saliency(), Linear);

        Assert.True(gradientTimesInput.Infidelity < 1e-9, $"gradient × input infidelity {gradientTimesInput.Infidelity}");
        Assert.True(integrated.Infidelity < 1e-9, $"integrated gradients infidelity {integrated.Infidelity}");
        Assert.True(saliency.RelativeInfidelity > 0.2, $"saliency (|w|, blind to x − x′) should predict the changes badly; got {saliency.RelativeInfidelity}");
        Assert.Equal(12, gradientTimesInput.Rows);
    }

    [Fact]
    public void SaliencyOfALinearModelIsInsensitiveAndGradientTimesInputMovesWithTheInput()
    {
        // Yeh et al. 2019, max-sensitivity max_{‖y − x‖ ≤ r} ‖Φ(y) − Φ(x)‖: a linear model's gradient is the same everywhere
        // (0), while gradient × input changes by w ⊙ (y − x): per feature at most Σ_{c ∈ feature} |w_c| times the box's
        // half-width r · range (ranges are at most 4 here), which bounds its L2 norm.
        var options = new QualityOptions { SampleRows = 12, SensitivityPerturbations = 6, SensitivityRadius = 0.05 };
        var (saliency, _) = Measure(new Saliency(), Linear, options);
        var (gradientTimesInput, _) = Measure(new GradientTimesInput(), Linear, options);

        Assert.Equal(0, saliency.MaxSensitivity, 6);
        double bound = 0.05 * 4 * Math.Sqrt(1.5 * 1.5 + 2 * 2 + (0.5 + 3) * (0.5 + 3));
        Assert.InRange(gradientTimesInput.MaxSensitivity, 1e-4, bound);
    }

    [Fact]
    public void ANonlinearModelsIntegratedGradientsHaveSomeInfidelityAndTheSubsampleIsSeeded()
    {
        using var model = new SmallNet(dense: 2, levels: 5, width: 2, hidden: 16, seed: 4);
        model.eval();
        var rows = new RowsBuilder().WithDense(2).WithRows(30).Build();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.tensor(rows.Dense, [30, 2]), torch.tensor(rows.Categorical, [30, 1])).detach();
        var input = new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(4), 64).WithSchema(model.Schema);
        var method = new IntegratedGradients(16);
        var map = method.Attribute(input);

        var first = MapQuality.Measure(method, input, map, new QualityOptions { SampleRows = 10, Seed = 1 });
        var again = MapQuality.Measure(method, input, map, new QualityOptions { SampleRows = 10, Seed = 1 });

        Assert.Equal(first, again);
        Assert.InRange(first.RelativeInfidelity, 1e-6, 1.5);
        Assert.True(first.RelativeMaxSensitivity > 0);
    }

    [Fact]
    public void BadQualitySettingsAreNamed()
    {
        var error = Assert.Throws<DriftWatchException>(() => new QualityOptions { RemovalProbability = 1 }.Validate());
        Assert.Contains("RemovalProbability must lie strictly between 0 and 1; got 1", error.Message);
    }
}
