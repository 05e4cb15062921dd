using System.Diagnostics;
using DriftWatch.Attribution;
using DriftWatch.Storage;
using TorchSharp;

namespace DriftWatch.Layers;

/// <summary>Builds the stored form of a layer map from a layer method's result.</summary>
public static class LayerMaps
{
    /// <summary>The attributed output F(x) of every probe row, so a reader knows which class the model predicted.</summary>
    public static float[] Outputs(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        using var scope = torch.NewDisposeScope();
        return Gradients.Scores(input.Score, input.Inputs.detach(), input.ChunkRows);
    }

    /// <summary>Runs <paramref name="method"/> on <paramref name="input"/> (whose <see cref="AttributionInput.Layer"/> is set) and returns the document to store.</summary>
    /// <exception cref="DriftWatchException">The method is not a layer method, or the input has no layer.</exception>
    internal static LayerMapDocument Attribute(IAttributionMethod method, AttributionInput input, float[] outputs, int runId, int epoch, string target)
    {
        ArgumentNullException.ThrowIfNull(method);
        ArgumentNullException.ThrowIfNull(input);
        ArgumentNullException.ThrowIfNull(outputs);
        if (method is not ILayerMethod)
            throw new DriftWatchException($"'{method.Name}' is not a layer method");
        var layer = input.Layer ?? throw new DriftWatchException($"{method.Name} needs AttributionInput.Layer");
        var watch = Stopwatch.StartNew();
        var result = method.Attribute(input);
        float[]? deltas = null;
        if (result.OutputGaps is not null)
        {
            deltas = new float[result.Rows];
            for (int r = 0; r < result.Rows; r++)
            {
                double sum = 0;
                for (int u = 0; u < result.Columns; u++)
                    sum += result.Scores[r * result.Columns + u];
                deltas[r] = (float)Math.Abs(sum - result.OutputGaps[r]);
            }
        }
        return new LayerMapDocument
        {
            RunId = runId,
            Epoch = epoch,
            Layer = layer.Path,
            Method = method.Name,
            Target = target,
            Rows = result.Rows,
            Units = result.Columns,
            Scores = FloatBytes.FromFloats(result.Scores),
            OutputGaps = result.OutputGaps is null ? null : FloatBytes.FromFloats(result.OutputGaps),
            Deltas = deltas is null ? null : FloatBytes.FromFloats(deltas),
            Outputs = FloatBytes.FromFloats(outputs),
            Seconds = watch.Elapsed.TotalSeconds,
            Evaluations = result.Evaluations,
            Settings = new Dictionary<string, string>(method.Settings, StringComparer.Ordinal),
        };
    }
}
