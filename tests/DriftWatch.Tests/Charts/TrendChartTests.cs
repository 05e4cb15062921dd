using DriftWatch.Charts;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using SkiaSharp;
using Xunit;

namespace DriftWatch.Tests.Charts;

public sealed class TrendChartTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public TrendChartTests(DemoStoreFixture fixture) => _fixture = fixture;

    [Fact]
    public void TheTrendChartIsAPngOfTheAskedSizeAndNotBlank()
    {
        string path = Path.Combine(_fixture.Folder, "trend-test.png");
        using (var store = RunStore.OpenForReading(_fixture.StorePath))
            new TrendChart(topFeatures: 5).Render(RunHistory.Load(store, DemoStoreFixture.LeakRun), path, new ChartSize(1200, 700));

        using var bitmap = SKBitmap.Decode(path);
        Assert.Equal(1200, bitmap.Width);
        Assert.Equal(700, bitmap.Height);
        var colours = new HashSet<SKColor>();
        for (int y = 0; y < bitmap.Height; y += 7)
        {
            for (int x = 0; x < bitmap.Width; x += 7)
                colours.Add(bitmap.GetPixel(x, y));
        }
        Assert.True(colours.Count > 20, $"only {colours.Count} colours: the chart looks blank");
        // Text drawn with the bundled font: the dark title pixels near the top centre.
        int dark = 0;
        for (int y = 5; y < 45; y++)
        {
            for (int x = 300; x < 900; x++)
                dark += bitmap.GetPixel(x, y).Red < 100 ? 1 : 0;
        }
        Assert.True(dark > 200, $"{dark} dark pixels where the title should be");
    }

    [Fact]
    public void TheBundledFontIsRegisteredAndLicensed()
    {
        ChartFonts.EnsureRegistered();
        Assert.Contains("DejaVu", ChartFonts.FamilyName, StringComparison.Ordinal);
        Assert.Contains("Bitstream", ChartFonts.LicenceText(), StringComparison.Ordinal);
    }

    [Theory]
    [InlineData(100, 700)]
    [InlineData(1200, 9000)]
    public void ChartSizesOutOfRangeAreRefused(int width, int height)
    {
        var e = Assert.Throws<DriftWatchException>(() => new ChartSize(width, height));
        Assert.Contains("between 400 and 8000", e.Message);
    }
}
