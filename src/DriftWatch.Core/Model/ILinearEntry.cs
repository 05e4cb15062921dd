using static TorchSharp.torch;

namespace DriftWatch.Model;

/// <summary>
/// Optional for a watched model whose score step opens with an affine layer on feature space, as most tabular and
/// recommendation models do: <c>Score(f) = ScoreAfterEntry(f Wᵀ + b)</c>.
/// </summary>
/// <remarks>
/// Integrated Gradients then walks its straight path in the entry layer's output instead of in feature space. An affine
/// map takes a straight line to a straight line, so the path's points there are the two ends' images mixed by α, and
/// the gradient with respect to the features is the entry gradient times W, which commutes with the sum over steps.
/// The attributions are the same numbers up to float rounding, but the entry layer runs once per row instead of once
/// per step in both the forward and the backward pass. Before each attribution the claim is checked on a few probe rows
/// (<see cref="Attribution.LinearEntry.Check"/>); a model whose entry does not reproduce its score step gets a clear
/// error, never wrong maps.
/// </remarks>
public interface ILinearEntry
{
    /// <summary>The entry layer's weight, <c>[units, columns]</c> (the layout of a linear layer's weight).</summary>
    Tensor EntryWeight { get; }

    /// <summary>The entry layer's bias, <c>[units]</c>, or null for none.</summary>
    Tensor? EntryBias { get; }

    /// <summary>The rest of the score step: the entry layer's output <c>[rows, units]</c> to the model output.</summary>
    Tensor ScoreAfterEntry(Tensor entry);
}
