using DriftWatch.Attribution;
using MathNet.Numerics.Integration;
using Xunit;

namespace DriftWatch.Tests.Attribution;

public sealed class QuadratureTests
{
    [Theory]
    [InlineData(2)]
    [InlineData(5)]
    [InlineData(16)]
    [InlineData(64)]
    public void GaussLegendreNodesAndWeightsMatchMathNet(int n)
    {
        // Reference: MathNet.Numerics' GaussLegendreRule on [0, 1].
        var reference = new GaussLegendreRule(0, 1, n);
        var ours = Quadrature.Create(QuadratureRule.GaussLegendre, n);
        var order = Enumerable.Range(0, n).OrderBy(i => reference.Abscissas[i]).ToArray();
        for (int k = 0; k < n; k++)
        {
            Assert.Equal(reference.Abscissas[order[k]], ours.Nodes[k], 12);
            Assert.Equal(reference.Weights[order[k]], ours.Weights[k], 12);
        }
    }

    [Fact]
    public void FivePointGaussLegendreMatchesTheTabulatedValues()
    {
        // Abramowitz & Stegun, Table 25.4 (values from memory): n = 5 on [−1, 1], nodes 0, ±0.538469310105683, ±0.906179845938664,
        // weights 0.568888888888889, 0.478628670499366, 0.236926885056189.
        var q = Quadrature.Create(QuadratureRule.GaussLegendre, 5);
        double[] nodes = [-0.906179845938664, -0.538469310105683, 0, 0.538469310105683, 0.906179845938664];
        double[] weights = [0.236926885056189, 0.478628670499366, 0.568888888888889, 0.478628670499366, 0.236926885056189];
        for (int k = 0; k < 5; k++)
        {
            Assert.Equal((nodes[k] + 1) / 2, q.Nodes[k], 12);
            Assert.Equal(weights[k] / 2, q.Weights[k], 12);
        }
    }

    [Theory]
    [InlineData(QuadratureRule.RiemannMidpoint, 1)]
    [InlineData(QuadratureRule.RiemannTrapezoid, 2)]
    [InlineData(QuadratureRule.GaussLegendre, 1)]
    [InlineData(QuadratureRule.GaussLegendre, 200)]
    public void WeightsSumToOne(QuadratureRule rule, int n)
    {
        Assert.Equal(1.0, Quadrature.Create(rule, n).Weights.Sum(), 12);
    }

    [Theory]
    [InlineData(0)]
    [InlineData(5000)]
    public void OutOfRangeStepCountsAreRefusedWithTheValue(int n)
    {
        var e = Assert.Throws<DriftWatchException>(() => Quadrature.Create(QuadratureRule.RiemannMidpoint, n));
        Assert.Contains($"got {n}", e.Message);
    }
}
