using DriftWatch.Attribution;
using Xunit;

namespace DriftWatch.Tests.Attribution;

public sealed class QualityOptionsTests
{
    [Theory]
    [InlineData("SampleRows", 0, "quality SampleRows must be between 1 and 100000; got 0")]
    [InlineData("SampleRows", 100_001, "quality SampleRows must be between 1 and 100000; got 100001")]
    [InlineData("InfidelityPerturbations", 0, "quality InfidelityPerturbations must be between 1 and 100000; got 0")]
    [InlineData("SensitivityPerturbations", -1, "quality SensitivityPerturbations must be between 0 (off) and 10000; got -1")]
    public void AWholeNumberOutOfRangeThrowsWhenSet(string setting, int value, string expected)
    {
        var e = Assert.Throws<DriftWatchException>(() => setting switch
        {
            "SampleRows" => new QualityOptions { SampleRows = value },
            "InfidelityPerturbations" => new QualityOptions { InfidelityPerturbations = value },
            _ => new QualityOptions { SensitivityPerturbations = value },
        });
        Assert.Equal(expected, e.Message);
    }

    [Theory]
    [InlineData(0.0, "quality RemovalProbability must lie strictly between 0 and 1; got 0")]
    [InlineData(1.0, "quality RemovalProbability must lie strictly between 0 and 1; got 1")]
    [InlineData(double.NaN, "quality RemovalProbability must lie strictly between 0 and 1; got NaN")]
    public void ARemovalProbabilityOutsideTheOpenIntervalThrowsWhenSet(double value, string expected) =>
        Assert.Equal(expected, Assert.Throws<DriftWatchException>(() => new QualityOptions() with { RemovalProbability = value }).Message);

    [Fact]
    public void TheRadiusMayBeZeroOrOneButNothingOutside()
    {
        Assert.Equal(0, new QualityOptions { SensitivityRadius = 0 }.SensitivityRadius);
        Assert.Equal(1, new QualityOptions { SensitivityRadius = 1 }.SensitivityRadius);
        Assert.Equal("quality SensitivityRadius must be between 0 and 1 (a fraction of each column's range); got 1.5",
            Assert.Throws<DriftWatchException>(() => new QualityOptions { SensitivityRadius = 1.5 }).Message);
        new QualityOptions { SampleRows = 100_000, SensitivityPerturbations = 0 }.Validate();
    }
}
