using DriftWatch.Probing;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Hooks;

/// <summary>
/// The library's Adam (DriftWatch.Hooks.Optimizers) is TorchSharp's Adam with its scalars held: checked step for step against TorchSharp 0.107's own
/// <c>torch.optim.Adam</c> (the reference here; Kingma and Ba 2015, Algorithm 1, as PyTorch formulates it).
/// </summary>
public sealed class AdamTests
{
    private const int Steps = 40;

    [Fact]
    public void EveryStepGivesTheWeightsTorchSharpsAdamGives()
    {
        using var reference = new SmallNet(3, 5, 4, seed: 7);
        using var held = new SmallNet(3, 5, 4, seed: 7);
        using var referenceOptimizer = torch.optim.Adam(reference.parameters(), 0.01);
        using var heldOptimizer = new DriftWatch.Hooks.Optimizers.Adam(held.parameters(), 0.01);
        var rows = new RowsBuilder().WithRows(64).WithSeed(5).Build();

        for (int step = 0; step < Steps; step++)
        {
            Step(reference, referenceOptimizer, rows);
            Step(held, heldOptimizer, rows);
        }

        // The same kernels in the same order: equal to the bit, not just close.
        Assert.Equal(Weights(reference), Weights(held));
        using var untrained = new SmallNet(3, 5, 4, seed: 7);
        Assert.NotEqual(Weights(untrained), Weights(held)); // and training did move them
    }

    [Fact]
    public void ItsStateFileLoadsIntoTorchSharpsAdamAndBothGoOnAlike()
    {
        var rows = new RowsBuilder().WithRows(64).WithSeed(6).Build();
        using var held = new SmallNet(3, 5, 4, seed: 8);
        using var heldOptimizer = new DriftWatch.Hooks.Optimizers.Adam(held.parameters(), 0.01);
        for (int step = 0; step < 10; step++)
            Step(held, heldOptimizer, rows);
        var state = new MemoryStream();
        using (var writer = new BinaryWriter(state, System.Text.Encoding.UTF8, leaveOpen: true))
            heldOptimizer.save_state_dict(writer);

        using var reference = new SmallNet(3, 5, 4, seed: 8);
        using (var weights = new MemoryStream())
        {
            held.save(new BinaryWriter(weights));
            weights.Position = 0;
            reference.load(new BinaryReader(weights));
        }
        using var referenceOptimizer = torch.optim.Adam(reference.parameters(), 0.01);
        state.Position = 0;
        using (var reader = new BinaryReader(state))
            referenceOptimizer.load_state_dict(reader);

        for (int step = 0; step < 10; step++)
        {
            Step(reference, referenceOptimizer, rows);
            Step(held, heldOptimizer, rows);
        }
        Assert.Equal(Weights(reference), Weights(held));

        // And the other way: a state file TorchSharp's Adam wrote (as the demo did before) loads into the library's Adam.
        using var fresh = new DriftWatch.Hooks.Optimizers.Adam(held.parameters(), 0.01);
        var referenceState = new MemoryStream();
        using (var writer = new BinaryWriter(referenceState, System.Text.Encoding.UTF8, leaveOpen: true))
            referenceOptimizer.save_state_dict(writer);
        referenceState.Position = 0;
        using (var reader = new BinaryReader(referenceState))
            fresh.load_state_dict(reader);
        for (int step = 0; step < 5; step++)
        {
            Step(reference, referenceOptimizer, rows);
            Step(held, fresh, rows);
        }
        Assert.Equal(Weights(reference), Weights(held));
    }

    private static void Step(SmallNet model, optim.Optimizer optimizer, ProbeRows rows)
    {
        using var scope = torch.NewDisposeScope();
        model.train();
        optimizer.zero_grad();
        var logits = model.call(torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]), torch.tensor(rows.Categorical, [rows.Count, 1])).squeeze(1);
        var loss = nn.functional.binary_cross_entropy_with_logits(logits, torch.tensor(rows.Labels!));
        loss.backward();
        optimizer.step();
    }

    private static float[] Weights(nn.Module module) =>
        [.. module.parameters().SelectMany(p => p.detach().cpu().data<float>().ToArray())];
}
