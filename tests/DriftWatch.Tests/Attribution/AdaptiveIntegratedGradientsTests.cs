using DriftWatch.Attribution;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using TorchSharp;
using Xunit;

namespace DriftWatch.Tests.Attribution;

public sealed class AdaptiveIntegratedGradientsTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public AdaptiveIntegratedGradientsTests(DemoStoreFixture fixture) => _fixture = fixture;

    [Fact]
    public void AdaptiveReachesOnePercentWithHalfTheEvaluationsOfFixedSteps()
    {
        // Sundararajan, Taly, Yan 2017, completeness: a converged IG sums to F(x) − F(x′). On the trained demo model the
        // adaptive scheme must agree with a 512-step reference within 1% of the mean |F(x) − F(x′)| and spend at most half
        // the model evaluations of fixed 64-step Riemann (counted, not timed).
        var scenario = ScenarioBuilder.For(GreenhouseVariant.Clean).WithSeed(3).Build();
        using var model = GreenhouseNet.For(scenario);
        using (var store = RunStore.OpenForReading(_fixture.StorePath))
        {
            var run = store.GetRun(DemoStoreFixture.CleanRun);
            using var weights = store.ReadSnapshot(store.Epochs(run.Id)[^1].SnapshotId!);
            model.load(weights);
        }
        var rows = scenario.Validation.Rows;
        using var scope = torch.NewDisposeScope();
        model.eval();
        var features = model.Encode(torch.tensor(rows.Dense, [rows.Count, rows.DenseCount])[..128], torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount])[..128]).detach();
        var input = new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(features.shape[1]), 8192);

        var adaptive = new AdaptiveIntegratedGradients();
        var fast = adaptive.Attribute(input);
        var reference = new IntegratedGradients(512).Attribute(input);
        var fixed64 = new IntegratedGradients(64).Attribute(input);

        double typical = reference.OutputGaps!.Average(g => Math.Abs((double)g));
        int columns = input.Columns;
        double meanDifference = Enumerable.Range(0, input.Rows)
            .Average(r => Math.Abs(Enumerable.Range(0, columns).Sum(c => (double)fast.Scores[r * columns + c] - reference.Scores[r * columns + c])));
        Assert.True(meanDifference <= 0.01 * typical, $"mean row difference {meanDifference / typical:P2} of the mean output gap");
        Assert.True(AttributionMap.FromColumns(fast, model.Schema).RelativeMeanDelta() <= 0.01);
        Assert.True(fast.Evaluations <= fixed64.Evaluations / 2, $"adaptive {fast.Evaluations} evaluations, fixed 64 steps {fixed64.Evaluations}");
        Assert.Contains(adaptive.LastStepsPerRow, s => s > adaptive.InitialSteps); // some rows needed more
    }

    [Fact]
    public void BadSettingsAreRefused()
    {
        Assert.Throws<DriftWatchException>(() => new AdaptiveIntegratedGradients(initialSteps: 64, maximumSteps: 32));
        Assert.Throws<DriftWatchException>(() => new AdaptiveIntegratedGradients(tolerance: 0));
    }
}
