using System.Collections.Immutable;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>Layer activation: each unit's output at the input row, a cheap view of which units fire (no gradient).</summary>
/// <remarks>Scores are in the layer's own units, not the target's; they do not sum to the output.</remarks>
public sealed class LayerActivation : ILayerMethod
{
    /// <inheritdoc />
    public string Name => "layer-activation";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; } = ImmutableSortedDictionary<string, string>.Empty;

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        var layer = LayerInputs.Require(input, Name);
        return LayerAtInput.Run(input, layer, withGradient: false);
    }
}

/// <summary>Gradient × activation at a layer: ∂F/∂y · y at the input row, per unit, a one-pass view of each unit's pull on the output.</summary>
/// <remarks>Scores are in the target's units; unlike conductance they do not sum to F(x) − F(x′).</remarks>
public sealed class LayerGradientTimesActivation : ILayerMethod
{
    /// <inheritdoc />
    public string Name => "layer-gradient-x-activation";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; } = ImmutableSortedDictionary<string, string>.Empty;

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        var layer = LayerInputs.Require(input, Name);
        return LayerAtInput.Run(input, layer, withGradient: true);
    }
}

/// <summary>The layer's output (and optionally its gradient) at every input row, in chunks.</summary>
internal static class LayerAtInput
{
    public static ColumnAttribution Run(AttributionInput input, Model.WatchedLayer layer, bool withGradient)
    {
        Gradients.CheckChunk(input.ChunkRows);
        using var scope = torch.NewDisposeScope();
        int rows = input.Rows;
        var x = input.Inputs.detach();
        Tensor? result = null;
        for (long start = 0; start < rows; start += input.ChunkRows)
        {
            using var chunk = torch.NewDisposeScope();
            long end = Math.Min(rows, start + input.ChunkRows);
            var points = x[TensorIndex.Slice(start, end)];
            Tensor values;
            if (withGradient)
            {
                using var enabled = torch.enable_grad();
                var (score, leaf) = layer.ScoreThroughLeaf(input.Score, points);
                var gradient = torch.autograd.grad([score.sum()], [leaf])[0];
                values = (gradient * leaf.detach()).reshape(end - start, -1);
            }
            else
            {
                using var noGrad = torch.no_grad();
                var (_, output) = layer.ScoreAndOutput(input.Score, points);
                values = output.detach().reshape(end - start, -1);
            }
            if (result is null)
                result = torch.empty(rows, values.shape[1], dtype: ScalarType.Float32).MoveToOuterDisposeScope();
            result[TensorIndex.Slice(start, end)] = values.to(ScalarType.Float32);
        }
        return new ColumnAttribution(rows, (int)result!.shape[1], Gradients.ToArray(result), null, rows);
    }
}
