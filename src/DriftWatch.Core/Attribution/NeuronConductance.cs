using System.Collections.Immutable;
using System.Globalization;
using System.Runtime.InteropServices;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// Neuron conductance (Dhamdhere, Sundararajan, Yan 2018): one hidden unit's conductance attributed back to the
/// feature-space columns, (x_i − x′_i) · ∫ ∂F/∂y · ∂y/∂x_i dα along the Integrated Gradients path.
/// </summary>
/// <remarks>
/// Summed over the columns it approaches that unit's <see cref="LayerConductance"/>. The unit is an index into the layer's
/// output flattened per row. Scores are in the target's units; each point costs one forward and two backward passes.
/// </remarks>
public sealed class NeuronConductance : IAttributionMethod
{
    private readonly Quadrature _quadrature;

    /// <summary>Creates the method for one unit.</summary>
    /// <param name="unit">The unit, from 0, in the layer's flattened output.</param>
    /// <param name="steps">Quadrature points along the path. Default 64.</param>
    /// <param name="rule">Quadrature rule. Default <see cref="QuadratureRule.RiemannMidpoint"/>.</param>
    public NeuronConductance(int unit, int steps = 64, QuadratureRule rule = QuadratureRule.RiemannMidpoint)
    {
        if (unit < 0)
            throw new DriftWatchException($"neuron conductance needs a unit index of at least 0; got {unit}");
        _quadrature = Quadrature.Create(rule, steps);
        Unit = unit;
        Steps = steps;
        Settings = ImmutableSortedDictionary.CreateRange(
        [
            KeyValuePair.Create("quadrature", rule.ToString()),
            KeyValuePair.Create("steps", steps.ToString(CultureInfo.InvariantCulture)),
            KeyValuePair.Create("unit", unit.ToString(CultureInfo.InvariantCulture)),
        ]);
    }

    /// <summary>The unit attributed.</summary>
    public int Unit { get; }

    /// <summary>Quadrature points along the path.</summary>
    public int Steps { get; }

    /// <inheritdoc />
    public string Name => "neuron-conductance";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; }

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        var layer = LayerInputs.Require(input, Name);
        Gradients.CheckChunk(input.ChunkRows);
        using var scope = torch.NewDisposeScope();
        int rows = input.Rows, columns = input.Columns;
        var x = input.Inputs.detach();
        var baseline = input.BaselineRows().detach();
        var difference = x - baseline;
        var nodes = torch.tensor(ImmutableCollectionsMarshal.AsArray(_quadrature.Nodes)!, dtype: x.dtype);
        var weights = torch.tensor(ImmutableCollectionsMarshal.AsArray(_quadrature.Weights)!, dtype: x.dtype);
        var integral = torch.zeros(rows, columns, dtype: x.dtype);
        long total = (long)rows * Steps;
        for (long start = 0; start < total; start += input.ChunkRows)
        {
            using var chunk = torch.NewDisposeScope();
            long end = Math.Min(total, start + input.ChunkRows);
            var index = torch.arange(start, end, dtype: ScalarType.Int64);
            var row = HeldScalars.FloorDivide(index, Steps);
            var step = HeldScalars.Remainder(index, Steps);
            var alpha = nodes.index_select(0, step).unsqueeze(1);
            using var enabled = torch.enable_grad();
            var points = (baseline.index_select(0, row) + alpha * difference.index_select(0, row)).detach().requires_grad_(true);
            var (score, output) = layer.ScoreAndOutput(input.Score, points);
            var flat = output.reshape(end - start, -1);
            if (Unit >= flat.shape[1])
                throw new DriftWatchException($"unit {Unit} is out of range: layer '{layer.Path}' has {flat.shape[1]} units (0 to {flat.shape[1] - 1})");
            // ∂F/∂y_j at each point, then the gradient of y_j weighted by it: the chain through this one unit only.
            var outward = torch.autograd.grad([score.sum()], [output], retain_graph: true)[0].reshape(end - start, -1).select(1, Unit).detach();
            var through = torch.autograd.grad([(flat.select(1, Unit) * outward).sum()], [points])[0];
            HeldScalars.IndexAdd(integral, row, through * weights.index_select(0, step).unsqueeze(1));
        }
        var scores = Gradients.ToArray(integral * difference);
        return new ColumnAttribution(rows, columns, scores, null, total);
    }
}
