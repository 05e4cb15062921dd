using DriftWatch.Attribution;
using DriftWatch.Hooks;
using DriftWatch.Hooks.Models;
using DriftWatch.Model;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Attribution;

public sealed class MemoryBudgetTests
{
    // RowsBuilder's shape (7 feature-space columns) with one hidden layer of 1,000 units.
    private static TabularNet WideRows() => new(RowsShapedModels.Settings(1000));

    [Fact]
    public void ARowCostsItsLayersOutputsTwiceAndItself()
    {
        // Reverse-mode differentiation keeps each layer's output for the backward pass, and the gradient flowing back
        // through a layer has that output's size (common practice). Per row: Linear 1,000 + GELU 1,000 + Linear 1
        // float32 values, twice, plus the row's own 7 values: (2 × 2,001 + 7) × 4 bytes.
        using var model = WideRows();
        model.eval();
        using var scope = torch.NewDisposeScope();
        var features = RowsShapedModels.Features(model, 10);

        long bytes = MemoryBudget.BytesPerRow(model, f => model.Score(f).squeeze(1), features);

        Assert.Equal((2 * 2001 + 7) * 4, bytes);
    }

    [Theory]
    [InlineData(16_036, 1 << 20, 2048, 65)] // the budget decides
    [InlineData(16_036, 256L << 20, 2048, 2048)] // the cap decides
    [InlineData(16_036, 1000, 2048, 1)] // never fewer than one row
    [InlineData(0, 1 << 20, 2048, 2048)] // the cost of a row unknown: the cap
    public void BlocksHoldWhatTheBudgetAllowsUpToTheCap(long bytesPerRow, long budget, int cap, int expected)
    {
        Assert.Equal(expected, MemoryBudget.ChunkRows(bytesPerRow, budget, cap));
    }

    [Fact]
    public void AModelWithLargeRowsGetsSmallBlocksAndTheSameAttributions()
    {
        using var model = WideRows();
        model.eval();
        using var scope = torch.NewDisposeScope();
        var features = RowsShapedModels.Features(model, 24);
        var baseline = torch.zeros(7);

        var tight = AttributionInput.ForModel(model, AttributionTarget.Logit, features, baseline, 2048, model.Schema, memoryBudgetBytes: 1 << 20);
        var roomy = AttributionInput.ForModel(model, AttributionTarget.Logit, features, baseline, 2048, model.Schema);
        Assert.Equal(65, tight.ChunkRows);
        Assert.Equal(2048, roomy.ChunkRows);

        var method = new IntegratedGradients(32); // 65-row blocks hold 2 rows' paths: 12 blocks against 1
        var small = method.Attribute(tight).Scores;
        var whole = method.Attribute(roomy).Scores;
        double scale = whole.Max(v => Math.Abs((double)v));
        Assert.True(scale > 1e-3);
        for (int i = 0; i < whole.Length; i++)
            Assert.True(Math.Abs(whole[i] - small[i]) <= 1e-5 * (1 + scale), $"value {i}: {whole[i]} against {small[i]}");
    }

    [Fact]
    public void TheMonitorRefusesABudgetOfNothing()
    {
        using var temp = new TempFolder();
        using var model = WideRows();

        // The options refuse it as soon as it is set, before any monitor exists.
        var error = Assert.Throws<DriftWatchException>(() => new MonitorOptions
        {
            StorePath = temp.File("s.litedb"),
            RunName = "budget",
            Schema = model.Schema,
            Probe = TestProbes.Small(),
            Methods = [new IntegratedGradients(8)],
            MemoryBudgetBytes = 0,
        });
        Assert.Equal("MemoryBudgetBytes must be at least 1; got 0", error.Message);
        Assert.False(File.Exists(temp.File("s.litedb")));
    }

    [Fact]
    public void AScoreStepThatCallsNoSubmoduleLeavesTheCap()
    {
        using var model = WideRows();
        using var scope = torch.NewDisposeScope();
        var features = RowsShapedModels.Features(model, 4);

        Assert.Equal(0, MemoryBudget.BytesPerRow(model, f => f.sum(dim: 1), features));
    }
}
