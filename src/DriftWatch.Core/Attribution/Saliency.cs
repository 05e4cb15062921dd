using System.Collections.Immutable;
using TorchSharp;

namespace DriftWatch.Attribution;

/// <summary>Saliency (Simonyan, Vedaldi, Zisserman 2014): |∂F/∂x| at x; a categorical's score is the sum over its columns.</summary>
public sealed class Saliency : IAttributionMethod
{
    /// <inheritdoc />
    public string Name => "saliency";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; } = ImmutableSortedDictionary<string, string>.Empty;

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        Gradients.CheckChunk(input.ChunkRows);
        using var scope = torch.NewDisposeScope();
        var gradient = Gradients.AtRows(input.Score, input.Inputs.detach(), input.ChunkRows);
        return new ColumnAttribution(input.Rows, input.Columns, Gradients.ToArray(gradient.abs()), null, input.Rows);
    }
}
