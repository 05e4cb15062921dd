using System.Collections.Immutable;
using System.Globalization;
using System.Runtime.InteropServices;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// Layer conductance (Dhamdhere, Sundararajan, Yan 2018, "How Important Is a Neuron?"): the attribution of the output to
/// each unit of a hidden layer along the Integrated Gradients path from the baseline to the input, in the efficient form
/// Σ_k ∂F/∂y · (y(α_k) − y(α_{k−1})) of Shrikumar, Su, Kundaje 2018 ("Computationally Efficient Measures of Internal
/// Neuron Importance").
/// </summary>
/// <remarks>
/// The path is cut at <see cref="Steps"/> + 1 equally spaced points α_k = k / steps; on each interval the layer's change is
/// weighted by the mean of the gradients at its two ends (the trapezoid rule), so one forward and one backward pass per
/// point suffice and the gradient stops at the layer. When every path from the input to the output crosses the layer,
/// the units' conductances sum to F(x) − F(x′) (completeness); that gap is returned per row, so the map records each
/// row's convergence delta. Scores are in the target's units.
/// </remarks>
public sealed class LayerConductance : ILayerMethod
{
    /// <summary>Creates the method.</summary>
    /// <param name="steps">Intervals along the path (points are one more). Default 64.</param>
    public LayerConductance(int steps = 64)
    {
        if (steps < 1 || steps > 4096)
            throw new DriftWatchException($"layer conductance steps must be between 1 and 4096; got {steps}");
        Steps = steps;
        Settings = ImmutableSortedDictionary.CreateRange([KeyValuePair.Create("steps", steps.ToString(CultureInfo.InvariantCulture))]);
    }

    /// <summary>Intervals along the path.</summary>
    public int Steps { get; }

    /// <inheritdoc />
    public string Name => "layer-conductance";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; }

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        var layer = LayerInputs.Require(input, Name);
        Gradients.CheckChunk(input.ChunkRows);
        using var scope = torch.NewDisposeScope();
        int rows = input.Rows, points = Steps + 1;
        var x = input.Inputs.detach();
        var baseline = input.BaselineRows().detach();
        var difference = x - baseline;
        long total = (long)rows * points;
        Tensor? outputs = null, gradients = null;
        var scores = torch.empty(total, dtype: ScalarType.Float32);

        for (long start = 0; start < total; start += input.ChunkRows)
        {
            using var chunk = torch.NewDisposeScope();
            long end = Math.Min(total, start + input.ChunkRows);
            var index = torch.arange(start, end, dtype: ScalarType.Int64);
            var row = HeldScalars.FloorDivide(index, points);
            var alpha = HeldScalars.Divide(HeldScalars.Remainder(index, points).to(x.dtype), Steps).unsqueeze(1);
            var path = baseline.index_select(0, row) + alpha * difference.index_select(0, row);
            using var enabled = torch.enable_grad();
            var (score, leaf) = layer.ScoreThroughLeaf(input.Score, path);
            Tensor gradient;
            try
            {
                gradient = torch.autograd.grad([score.sum()], [leaf])[0];
            }
            catch (ExternalException e)
            {
                throw new DriftWatchException($"the attributed output does not depend on layer '{layer.Path}' ({e.Message.Split('\n')[0]}); name a layer on the way from the input to the output", e);
            }
            var flatOutput = leaf.detach().reshape(end - start, -1).to(ScalarType.Float32);
            var flatGradient = gradient.reshape(end - start, -1).to(ScalarType.Float32);
            if (outputs is null)
            {
                outputs = torch.empty(total, flatOutput.shape[1], dtype: ScalarType.Float32).MoveToOuterDisposeScope();
                gradients = torch.empty(total, flatOutput.shape[1], dtype: ScalarType.Float32).MoveToOuterDisposeScope();
            }
            outputs[TensorIndex.Slice(start, end)] = flatOutput;
            gradients![TensorIndex.Slice(start, end)] = flatGradient;
            scores[TensorIndex.Slice(start, end)] = score.detach().reshape(-1).to(ScalarType.Float32);
        }

        long units = outputs!.shape[1];
        var y = outputs.view(rows, points, units);
        var g = gradients!.view(rows, points, units);
        var change = y.narrow(1, 1, Steps) - y.narrow(1, 0, Steps);
        var meanGradient = HeldScalars.Divide(g.narrow(1, 1, Steps) + g.narrow(1, 0, Steps), 2);
        var conductance = (meanGradient * change).sum(dim: 1);
        var along = scores.view(rows, points);
        var gaps = Gradients.ToArray(along.select(1, Steps) - along.select(1, 0));
        return new ColumnAttribution(rows, (int)units, Gradients.ToArray(conductance), gaps, total);
    }
}
