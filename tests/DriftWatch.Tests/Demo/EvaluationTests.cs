using DriftWatch.Demo.Evaluation;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Demo;

public sealed class EvaluationTests
{
    [Fact]
    public void JudgingAStoredEvaluationAgainGivesTheVerdictsTheLiveMonitorGave()
    {
        using var temp = new TempFolder();
        var options = EvaluationOptions.Parse(["--epochs", "5", "--steps", "8", "--probe", "32", "--out", temp.Path]);
        string store = temp.File("evaluation.litedb");
        var live = DetectorEvaluation.RunOne(GreenhouseVariant.LeakOnly, 3, options, store);

        var again = Assert.Single(DetectorEvaluation.Rejudge(store, options.Policy));

        Assert.Equal(live.Scenario, again.Scenario);
        Assert.Equal(live.Seed, again.Seed);
        Assert.Equal<string>(live.Planted, again.Planted);
        Assert.Equal(live.FirstHalt, again.FirstHalt);
        Assert.Equal(live.FirstAttributionHalt, again.FirstAttributionHalt);
        Assert.Equal(live.BestEpoch, again.BestEpoch);
        Assert.Equal(live.Gl5Epoch, again.Gl5Epoch);
        Assert.Equal(live.FirstNamed.OrderBy(n => n.Key), again.FirstNamed.OrderBy(n => n.Key));

        // A policy that may halt on nothing turns every Halt into at most a Caution when judged again.
        var quiet = GatePolicy.Default with { HaltOn = [] };
        Assert.Null(Assert.Single(DetectorEvaluation.Rejudge(store, quiet)).FirstHalt);
    }

    [Fact]
    public void AStoreNotWrittenByTheEvaluationIsRefusedWithItsRunName()
    {
        using var temp = new TempFolder();
        string path = temp.File("other.litedb");
        new StoreBuilder().WithRun("my-own-run").WithEpochs(2).Build(path);

        var error = Assert.Throws<DriftWatchException>(() => DetectorEvaluation.Rejudge(path, GatePolicy.Default));
        Assert.Contains("'my-own-run'", error.Message, StringComparison.Ordinal);
        Assert.Contains("evaluate --out", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void FromStoreIsAnOption()
    {
        Assert.Equal("a.litedb", EvaluationOptions.Parse(["--from-store", "a.litedb"]).FromStore);
        Assert.Contains("--from-store", EvaluationOptions.Usage, StringComparison.Ordinal);
    }
}
