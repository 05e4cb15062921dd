using DriftWatch.Charts;
using DriftWatch.Charts.Report;
using Xunit;

namespace DriftWatch.Tests.Charts;

public sealed class ChartOptionsTests
{
    [Theory]
    [InlineData(0, "the trend chart draws between 1 and 20 features; got 0")]
    [InlineData(21, "the trend chart draws between 1 and 20 features; got 21")]
    public void TopFeaturesOutOfRangeThrowWhenSetWithTheChartsMessage(int top, string expected)
    {
        Assert.Equal(expected, Assert.Throws<DriftWatchException>(() => new ChartOptions { TopFeatures = top }).Message);
        Assert.Equal(expected, Assert.Throws<DriftWatchException>(() => new TrendChart(top)).Message);
    }

    [Fact]
    public void ChoicesAndReportOptionsOutOfRangeThrowWhenSet()
    {
        Assert.Equal("the divergence chart draws between 1 and 6 features; got 7",
            Assert.Throws<DriftWatchException>(() => new ChartOptions { DivergenceFeatures = 7 }).Message);
        Assert.StartsWith("heatmap value must be Share, SignedMean, ShareGap; got 9",
            Assert.Throws<DriftWatchException>(() => new ChartOptions { HeatmapValue = (HeatmapValue)9 }).Message);
        Assert.Equal("chart width must be between 400 and 8000 pixels; got 0",
            Assert.Throws<DriftWatchException>(() => new ReportOptions { Size = default }).Message);
        Assert.StartsWith("report Method is empty", Assert.Throws<DriftWatchException>(() => new ReportOptions { Method = " " }).Message);
        Assert.StartsWith("report Charts must hold kinds among evidence, trend, divergence",
            Assert.Throws<DriftWatchException>(() => new ReportOptions { Charts = [ChartKind.Trend, (ChartKind)42] }).Message);
        Assert.StartsWith("report Choices is null", Assert.Throws<DriftWatchException>(() => new ReportOptions { Choices = null! }).Message);
        Assert.StartsWith("report Clock is null", Assert.Throws<DriftWatchException>(() => new ReportOptions { Clock = null! }).Message);
        var fine = new ReportOptions { Charts = [], Size = new ChartSize(400, 8000), Choices = new ChartOptions { TopFeatures = 20, DivergenceFeatures = 1 } };
        Assert.Equal(8000, fine.Size.Height);
        Assert.Equal(20, fine.Choices.TopFeatures);
    }
}
