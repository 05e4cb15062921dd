using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Model;

/// <summary>
/// The seam a model exposes to be watched: <see cref="Encode"/> turns raw inputs into one feature-space tensor,
/// <see cref="Score"/> turns feature space into the output. Attribution happens in feature space.
/// </summary>
public interface IWatchedModel
{
    /// <summary>Names the features and the feature-space columns each owns, in the order <see cref="Encode"/> lays them out.</summary>
    FeatureSchema Schema { get; }

    /// <summary>The module whose weights are snapshotted and whose train/eval mode is switched around attribution.</summary>
    nn.Module Module { get; }

    /// <summary>Raw batch (dense <c>[rows, dense]</c> float32, categorical <c>[rows, categoricals]</c> int64) to feature space <c>[rows, columns]</c>.</summary>
    Tensor Encode(Tensor dense, Tensor categorical);

    /// <summary>Feature space <c>[rows, columns]</c> to the output <c>[rows, outputs]</c> (or <c>[rows]</c>).</summary>
    Tensor Score(Tensor features);
}
