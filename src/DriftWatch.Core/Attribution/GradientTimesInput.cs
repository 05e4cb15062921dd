using System.Collections.Immutable;
using TorchSharp;

namespace DriftWatch.Attribution;

/// <summary>Gradient × input: ∂F/∂x at x times (x − x′); with a zero baseline this is the plain gradient × input.</summary>
public sealed class GradientTimesInput : IAttributionMethod
{
    /// <inheritdoc />
    public string Name => "gradient-x-input";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; } = ImmutableSortedDictionary<string, string>.Empty;

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        Gradients.CheckChunk(input.ChunkRows);
        using var scope = torch.NewDisposeScope();
        var x = input.Inputs.detach();
        var gradient = Gradients.AtRows(input.Score, x, input.ChunkRows);
        var scores = Gradients.ToArray(gradient * (x - input.BaselineRows()));
        return new ColumnAttribution(input.Rows, input.Columns, scores, null, input.Rows);
    }
}
