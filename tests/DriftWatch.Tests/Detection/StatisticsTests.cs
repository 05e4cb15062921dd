using DriftWatch.Detection;
using MathNet.Numerics.Distributions;
using MathNet.Numerics.Random;
using Xunit;

namespace DriftWatch.Tests.Detection;

public sealed class StatisticsTests
{
    [Theory]
    [InlineData(1)]
    [InlineData(2)]
    [InlineData(3)]
    public void SpearmanMatchesMathNetOnVectorsWithTies(int seed)
    {
        var random = new Random(seed);
        var x = Enumerable.Range(0, 60).Select(_ => (double)random.Next(8)).ToArray(); // many ties
        var y = x.Select(v => v + random.Next(5)).ToArray();

        // Reference: MathNet.Numerics Correlation.Spearman (average ranks for ties).
        Assert.Equal(MathNet.Numerics.Statistics.Correlation.Spearman(x, y), Statistics.Spearman(x, y), 12);
    }

    [Fact]
    public void PearsonMatchesMathNet()
    {
        var random = new Random(9);
        var x = Enumerable.Range(0, 40).Select(_ => random.NextDouble()).ToArray();
        var y = x.Select(v => v * v + random.NextDouble() * 0.1).ToArray();
        Assert.Equal(MathNet.Numerics.Statistics.Correlation.Pearson(x, y), Statistics.Pearson(x, y), 12);
    }

    [Fact]
    public void KendallTauBOnASmallHandComputedExampleWithTies()
    {
        // τ-b = (C − D) / √((C + D + Tx)(C + D + Ty)) (Kendall 1945; definition from memory). x = (1, 1, 2, 3), y = (1, 2, 3, 4):
        // 5 concordant pairs, 0 discordant, 1 pair tied in x only → 5 / √(6 · 5) = 0.912871.
        Assert.Equal(5 / Math.Sqrt(30), Statistics.KendallTauB([1, 1, 2, 3], [1, 2, 3, 4]), 12);
        Assert.Equal(-1, Statistics.KendallTauB([1, 2, 3, 4], [4, 3, 2, 1]), 12);
    }

    [Fact]
    public void KendallTauOnBivariateNormalDataFollowsGreinersRelation()
    {
        // Greiner's relation for a bivariate normal: τ = (2/π)·arcsin(ρ) (Kendall & Gibbons, Rank Correlation Methods; from memory).
        // Data drawn with MathNet.Numerics' normal sampler; n = 3000 gives a sampling s.d. of τ near 0.011.
        const double rho = 0.6;
        var normal = new Normal(0, 1, new MersenneTwister(21));
        var x = new double[3000];
        var y = new double[3000];
        for (int i = 0; i < x.Length; i++)
        {
            double a = normal.Sample(), b = normal.Sample();
            x[i] = a;
            y[i] = rho * a + Math.Sqrt(1 - rho * rho) * b;
        }
        Assert.Equal(2 / Math.PI * Math.Asin(rho), Statistics.KendallTauB(x, y), 1.5e-2);
    }

    [Fact]
    public void JensenShannonIsZeroForEqualAndLnTwoForDisjointDistributions()
    {
        // Lin 1991, "Divergence measures based on the Shannon entropy": 0 ≤ JS ≤ ln 2 (natural log), 0 iff equal, ln 2 for disjoint supports.
        Assert.Equal(0, Statistics.JensenShannon([0.2, 0.3, 0.5], [0.2, 0.3, 0.5]), 12);
        Assert.Equal(Math.Log(2), Statistics.JensenShannon([0.5, 0.5, 0, 0], [0, 0, 0.25, 0.75]), 12);
        Assert.InRange(Statistics.JensenShannon([0.7, 0.2, 0.1], [0.1, 0.2, 0.7]), 0.01, Math.Log(2));
    }

    [Fact]
    public void CusumOnAUnitStepSignalsWhereTheTabularRuleSays()
    {
        // Tabular CUSUM (Page 1954; Montgomery, Introduction to Statistical Quality Control, k = 0.5σ, h = 5σ — from memory).
        // σ = 1, μ0 = 10; the series steps to 11 at index 20. Each later point adds 11 − 10.5 = 0.5 to C⁺,
        // so C⁺ first exceeds 5 on the 11th shifted point, index 30 (C⁺ = 5.5).
        var cusum = new Cusum(target: 10, allowance: 0.5, threshold: 5);
        int? alarm = null;
        for (int t = 0; t < 40 && alarm is null; t++)
        {
            if (cusum.Add(t < 20 ? 10 : 11))
                alarm = t;
        }
        Assert.Equal(30, alarm);
        Assert.Equal(5.5, cusum.Upper, 12);
        Assert.Equal(0, cusum.Lower, 12);
    }

    [Fact]
    public void GeneralisationLossFollowsPrecheltsDefinition()
    {
        // Prechelt 1998, "Early Stopping — But When?": GL(t) = 100 · (E_va(t) / min_{t′≤t} E_va(t′) − 1); GL5 stops at the first GL > 5.
        double[] validation = [1.00, 0.80, 0.70, 0.72, 0.74, 0.69, 0.73, 0.75];
        var gl = Statistics.GeneralisationLoss(validation);

        double[] expected = [0, 0, 0, 100 * (0.72 / 0.70 - 1), 100 * (0.74 / 0.70 - 1), 0, 100 * (0.73 / 0.69 - 1), 100 * (0.75 / 0.69 - 1)];
        for (int t = 0; t < expected.Length; t++)
            Assert.Equal(expected[t], gl[t], 9);
        Assert.Equal(4, Array.FindIndex(gl, g => g > 5)); // 0.74 / 0.70 = +5.7% at t = 4 fires first
    }

    [Fact]
    public void WilsonLowerBoundMatchesTheClosedForm()
    {
        // Wilson 1927: for k = 45 of n = 50 at z = 1.96 the 95% interval's lower bound is 0.7864 (computed from the closed form).
        double p = 0.9, z = 1.96, n = 50;
        double expected = (p + z * z / (2 * n) - z * Math.Sqrt(p * (1 - p) / n + z * z / (4 * n * n))) / (1 + z * z / n);
        Assert.Equal(expected, Statistics.WilsonLowerBound(45, 50), 12);
        Assert.Equal(0.7864, Statistics.WilsonLowerBound(45, 50), 3);
    }
}
