using System.Collections.Immutable;
using System.Globalization;
using System.Runtime.InteropServices;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>Integrated Gradients (Sundararajan, Taly, Yan 2017): (x − x′) times the path integral of ∂F/∂x from x′ to x.</summary>
/// <remarks>
/// All steps × rows go through the model as one expanded batch, cut into chunks of at most
/// <see cref="AttributionInput.ChunkRows"/> rows. F(x) − F(x′) is returned per row so the convergence delta
/// |Σ attributions − (F(x) − F(x′))| can be stored with each map. When the input carries the model's affine entry layer
/// (<see cref="AttributionInput.Entry"/>), the path runs in that layer's output and the layer itself runs once per row
/// rather than once per step: the same attributions up to float rounding, for less work than one forward and backward
/// pass over the expanded rows.
/// </remarks>
public sealed class IntegratedGradients : IAttributionMethod
{
    private readonly Quadrature _quadrature;

    /// <summary>Creates the method.</summary>
    /// <param name="steps">Quadrature points along the path. Default 64.</param>
    /// <param name="rule">Quadrature rule. Default <see cref="QuadratureRule.RiemannMidpoint"/>.</param>
    public IntegratedGradients(int steps = 64, QuadratureRule rule = QuadratureRule.RiemannMidpoint)
    {
        _quadrature = Quadrature.Create(rule, steps);
        Steps = steps;
        Rule = rule;
        Settings = ImmutableSortedDictionary.CreateRange(
        [
            KeyValuePair.Create("steps", steps.ToString(CultureInfo.InvariantCulture)),
            KeyValuePair.Create("quadrature", rule.ToString()),
        ]);
    }

    /// <summary>Quadrature points along the path.</summary>
    public int Steps { get; }

    /// <summary>The quadrature rule.</summary>
    public QuadratureRule Rule { get; }

    /// <inheritdoc />
    public string Name => "integrated-gradients";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; }

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        var scores = Integrate(input);
        var (gaps, evaluations) = Gradients.OutputGaps(input);
        return new ColumnAttribution(input.Rows, input.Columns, scores, gaps, (long)input.Rows * Steps + evaluations);
    }

    /// <summary>The attributions alone, row-major, without evaluating F(x) and F(x′): steps × rows evaluations.</summary>
    internal float[] Integrate(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        Gradients.CheckChunk(input.ChunkRows);
        using var scope = torch.NewDisposeScope();
        int rows = input.Rows, columns = input.Columns;
        var x = input.Inputs.detach();
        var baseline = input.Baseline.detach();
        var difference = x - baseline; // a shared baseline [columns] broadcasts
        var nodes = torch.tensor(ImmutableCollectionsMarshal.AsArray(_quadrature.Nodes)!, dtype: x.dtype);
        var weights = torch.tensor(ImmutableCollectionsMarshal.AsArray(_quadrature.Weights)!, dtype: x.dtype);

        if (input.ChunkRows >= Steps)
        {
            // Whole rows per chunk, each row's path inside one chunk; all rows in one when they fit.
            if (rows == 0)
                return [];
            int rowsPerChunk = Math.Min(rows, input.ChunkRows / Steps);
            var alphas = nodes.view(Steps, 1, 1);
            var stepWeights = weights.view(1, Steps);
            bool shared = input.Baseline.dim() == 1;

            // With an affine entry layer the path runs in its output: the ends are f Wᵀ + b at x′ and x, and the
            // gradient with respect to the features is the entry gradient's weighted sum times W (ILinearEntry).
            var entry = input.Entry;
            var score = entry is null ? input.Score : entry.Rest;
            var from = entry is null ? baseline : entry.Apply(baseline);
            var span = entry is null ? difference : torch.mm(difference, entry.Weight.t());

            Tensor summed;
            if (rowsPerChunk == rows)
            {
                summed = IntegrateRows(score, shared ? from : from.unsqueeze(0), alphas, stepWeights, span);
            }
            else
            {
                var parts = new List<Tensor>();
                for (int start = 0; start < rows; start += rowsPerChunk)
                {
                    using var chunk = torch.NewDisposeScope();
                    int end = Math.Min(rows, start + rowsPerChunk);
                    var chunkFrom = shared ? from : from[start..end].unsqueeze(0);
                    parts.Add(IntegrateRows(score, chunkFrom, alphas, stepWeights, span[start..end]).MoveToOuterDisposeScope());
                }
                summed = torch.cat(parts, 0);
            }
            var gradient = entry is null ? summed : torch.mm(summed, entry.Weight);
            return Gradients.ToArray(gradient.mul_(difference));
        }

        // Fewer expanded rows per chunk than steps: index i = row * steps + step, so a chunk boundary falls inside a
        // row's path and index_add_ accumulates each gradient into its own row.
        long total = (long)rows * Steps;
        var integral = torch.zeros(rows, columns, dtype: x.dtype);
        var baselineRows = input.BaselineRows().detach();
        for (long start = 0; start < total; start += input.ChunkRows)
        {
            using var chunk = torch.NewDisposeScope();
            long end = Math.Min(total, start + input.ChunkRows);
            var index = torch.arange(start, end, dtype: ScalarType.Int64);
            var row = HeldScalars.FloorDivide(index, Steps);
            var step = HeldScalars.Remainder(index, Steps);
            var alpha = nodes.index_select(0, step).unsqueeze(1);
            var points = baselineRows.index_select(0, row) + alpha * difference.index_select(0, row);
            var gradient = Gradients.Of(input.Score, points);
            HeldScalars.IndexAdd(integral, row, gradient * weights.index_select(0, step).unsqueeze(1));
        }

        return Gradients.ToArray(integral * difference);
    }

    // Σ_k w_k ∂F/∂x at x′ + α_k (x − x′) for a block of rows, [rows, columns] (in feature space, or in the entry
    // layer's output with F its rest and x, x′ the ends' images there). The path points are one broadcast
    // multiply-add laid out step-major ([steps, rows, columns]); the backward pass is the plain one a training step
    // makes, and the weighted sum over steps is one matrix product of the step weights with the gradient seen as
    // [steps, rows × columns]: contiguous reads, no gather or scatter by index.
    private static Tensor IntegrateRows(Func<Tensor, Tensor> score, Tensor from, Tensor alphas, Tensor stepWeights, Tensor difference)
    {
        int steps = (int)alphas.shape[0];
        long rows = difference.shape[0], columns = difference.shape[1];
        var points = HeldScalars.AddProduct(from, alphas, difference.unsqueeze(0)).view(-1, columns);
        var gradient = Gradients.OfRows(score, points);
        return torch.mm(stepWeights, gradient.view(steps, -1)).view(rows, columns);
    }
}
