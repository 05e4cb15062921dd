namespace DriftWatch.Charts;

/// <summary>A chart: renders one picture of a run's history to a PNG file.</summary>
public interface IChart
{
    /// <summary>The chart's short name, used in file names, e.g. <c>trend</c>.</summary>
    string Name { get; }

    /// <summary>Renders the chart of <paramref name="history"/> to a PNG file at <paramref name="path"/>, replacing any file there.</summary>
    /// <exception cref="DriftWatchException">The history holds nothing this chart can draw.</exception>
    void Render(RunHistory history, string path, ChartSize size);
}
