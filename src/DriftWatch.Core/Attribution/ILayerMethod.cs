namespace DriftWatch.Attribution;

/// <summary>
/// An attribution method whose scores are per unit of a hidden layer (<see cref="AttributionInput.Layer"/>) rather than per
/// feature-space column: the result's columns are the layer's units.
/// </summary>
/// <remarks>Same seam as every other method: one <see cref="AttributionInput"/> in, one <see cref="ColumnAttribution"/> out.</remarks>
public interface ILayerMethod : IAttributionMethod
{
}

/// <summary>Checks shared by the layer methods.</summary>
internal static class LayerInputs
{
    /// <summary>The input's layer, or a clear error naming the method that needs it.</summary>
    public static Model.WatchedLayer Require(AttributionInput input, string method) =>
        input.Layer ?? throw new DriftWatchException($"{method} attributes to a hidden layer, but no layer was given; set AttributionInput.Layer (the monitor does for each of MonitorOptions.WatchedLayers)");
}
