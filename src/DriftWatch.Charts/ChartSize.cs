namespace DriftWatch.Charts;

/// <summary>The pixel size of a rendered chart.</summary>
public readonly record struct ChartSize
{
    /// <summary>The smallest width or height accepted, in pixels.</summary>
    public const int MinimumSide = 400;

    /// <summary>The largest width or height accepted, in pixels.</summary>
    public const int MaximumSide = 8000;

    /// <summary>Creates a size, checking both sides.</summary>
    /// <exception cref="DriftWatchException">A side is outside <see cref="MinimumSide"/>..<see cref="MaximumSide"/>.</exception>
    public ChartSize(int width, int height)
    {
        Check("width", width);
        Check("height", height);
        Width = width;
        Height = height;
    }

    /// <summary>The default size, 1200 × 700 pixels, at which every chart's text stays readable.</summary>
    public static ChartSize Default { get; } = new(1200, 700);

    /// <summary>Width in pixels.</summary>
    public int Width { get; }

    /// <summary>Height in pixels.</summary>
    public int Height { get; }

    private static void Check(string side, int value)
    {
        if (value is < MinimumSide or > MaximumSide)
            throw new DriftWatchException($"chart {side} must be between {MinimumSide} and {MaximumSide} pixels; got {value}");
    }
}
