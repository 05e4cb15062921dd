using SkiaSharp;
using Xunit;

namespace DriftWatch.Tests.Charts;

/// <summary>Checks a chart PNG: it exists, has the size asked for, and is not blank.</summary>
internal static class PngAssert
{
    /// <summary>Asserts the picture's size, and that its luminance varies (variance over a pixel grid above a floor) with many colours.</summary>
    public static void IsChart(string path, int width, int height)
    {
        Assert.True(File.Exists(path), $"no PNG at {path}");
        using var bitmap = SKBitmap.Decode(path);
        Assert.NotNull(bitmap);
        Assert.Equal(width, bitmap.Width);
        Assert.Equal(height, bitmap.Height);
        var colours = new HashSet<SKColor>();
        double sum = 0, sumSquares = 0;
        int count = 0, chromatic = 0;
        for (int y = 0; y < bitmap.Height; y += 5)
        {
            for (int x = 0; x < bitmap.Width; x += 5)
            {
                var c = bitmap.GetPixel(x, y);
                colours.Add(c);
                // Data is drawn in colour; text, axes, grid and verdict shading are grey.
                if (Math.Max(c.Red, Math.Max(c.Green, c.Blue)) - Math.Min(c.Red, Math.Min(c.Green, c.Blue)) > 40)
                    chromatic++;
                // Rec. 601 luma weights (common practice).
                double luma = 0.299 * c.Red + 0.587 * c.Green + 0.114 * c.Blue;
                sum += luma;
                sumSquares += luma * luma;
                count++;
            }
        }
        double mean = sum / count;
        double variance = sumSquares / count - mean * mean;
        // A white picture with a few lines of text has a variance near 100; a chart with panels, text and data is far above.
        Assert.True(variance > 250, $"luminance variance {variance:F0}: the chart looks blank");
        Assert.True(colours.Count > 30, $"only {colours.Count} colours: the chart looks blank");
        // A chart of title, axes and a "nothing to draw" note has no coloured pixels at all.
        Assert.True(chromatic > count / 1000, $"{chromatic} of {count} sampled pixels in colour: no data was drawn");
    }
}
