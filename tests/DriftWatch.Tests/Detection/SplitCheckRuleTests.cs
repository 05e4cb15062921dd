using System.Collections.Immutable;
using DriftWatch.Detection;
using DriftWatch.Probing;
using DriftWatch.Storage;
using MathNet.Numerics.Distributions;
using Xunit;

namespace DriftWatch.Tests.Detection;

public sealed class SplitCheckRuleTests
{
    private static IEnumerable<Finding> All(List<Assessment> run) => run.SelectMany(a => a.Verdict.Findings);

    // The history's raw inputs: dense air temperature, humidity, light hours; categorical crate id, tray.
    private static SplitCheckResult Check(bool airTemperatureFails = false, bool humidityFails = false) => new(
        "out-of-fold AUC", 3000, 1000, 799, 0.05, 0.02,
        [
            new SplitCheckInput(RawInputKind.Dense, 0, airTemperatureFails ? 0.74 : 0.70, airTemperatureFails ? 0.52 : 0.69, airTemperatureFails ? 0.00125 : 0.41, 0.03, airTemperatureFails),
            new SplitCheckInput(RawInputKind.Dense, 1, humidityFails ? 0.66 : 0.55, humidityFails ? 0.50 : 0.56, humidityFails ? 0.00125 : 0.77, 0.03, humidityFails),
            new SplitCheckInput(RawInputKind.Dense, 2, 0.51, 0.50, 0.52, 0.03, false),
            new SplitCheckInput(RawInputKind.Categorical, 0, 0.50, 0.50, 0.61, 0.03, false),
            new SplitCheckInput(RawInputKind.Categorical, 1, 0.58, 0.57, 0.35, 0.03, false),
        ]);

    [Fact]
    public void RelianceOnAColumnThatFailsTheCheckIsALeakCitingBoth()
    {
        var run = new HistoryBuilder().WithLeak(0, fromEpoch: 3).WithSplitCheck(Check(airTemperatureFails: true)).Run(7);
        var leak = All(run).First(f => f.Kind == FindingKind.Leak);
        Assert.Equal("air temperature", leak.Feature);
        Assert.Equal(4, run.First(a => a.Verdict.Findings.Any(f => f.Kind == FindingKind.Leak)).Verdict.Epoch); // patience 2 from epoch 3
        Assert.Contains("half exchanges", leak.Evidence, StringComparison.Ordinal);
        Assert.Contains("side exchanges", leak.Evidence, StringComparison.Ordinal);
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.OverfittedFeature);
        // Before the model relied on it, the same column was a data note from the first epoch on.
        var note = run[0].Verdict.Findings.Single(f => f.Kind == FindingKind.SplitInconsistency);
        Assert.Equal("air temperature", note.Feature);
        Assert.Equal(VerdictKind.Caution, note.Severity);
        Assert.DoesNotContain(run[5].Verdict.Findings, f => f.Kind == FindingKind.SplitInconsistency);
    }

    [Fact]
    public void TheSameRelianceOnAColumnThatPassesTheCheckIsAnOverfittedFeatureNeverALeak()
    {
        // The validation loss rises from epoch 3 (GL beyond the default α of 5 %, Prechelt 1998): the loss says the model
        // overfits, the attributions say on which feature.
        var run = new HistoryBuilder().WithLeak(0, fromEpoch: 3).WithSplitCheck(Check()).Run(7, validation: e => e < 3 ? 0.5 : 0.5 * (1 + 0.1 * (e - 2)));
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.Leak);
        var overfitted = All(run).First(f => f.Kind == FindingKind.OverfittedFeature);
        Assert.Equal("air temperature", overfitted.Feature);
        Assert.Equal(VerdictKind.Caution, overfitted.Severity);
        Assert.Contains("not a leak", overfitted.Evidence, StringComparison.Ordinal);
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.SplitInconsistency);
    }

    [Fact]
    public void WhileTheValidationLossStillFallsTheSameRelianceNamesNoFeature()
    {
        // Ordinary fitting: a genuine feature's gap alone, with the validation loss still falling, is not an overfitted feature.
        var run = new HistoryBuilder().WithLeak(0, fromEpoch: 3).WithSplitCheck(Check()).Run(7, validation: e => 0.5 - 0.01 * e);
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.Leak || f.Kind == FindingKind.OverfittedFeature);
    }

    [Fact]
    public void AFailingColumnTheModelDoesNotUseStaysADataNote()
    {
        var run = new HistoryBuilder().WithSplitCheck(Check(humidityFails: true)).Run(8);
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.Leak || f.Kind == FindingKind.OverfittedFeature);
        Assert.All(run, a => Assert.Equal("humidity", a.Verdict.Findings.Single(f => f.Kind == FindingKind.SplitInconsistency).Feature));
        Assert.Equal(new EpochSpan(0, 7), run[^1].Verdict.Findings.Single().Epochs);
    }

    [Fact]
    public void WithoutACheckTheLeakRuleKeepsItsAttributionOnlyTestAndSaysSoOnce()
    {
        var run = new HistoryBuilder().WithLeak(0, fromEpoch: 3).Run(7);
        var leaks = All(run).Where(f => f.Kind == FindingKind.Leak).ToList();
        Assert.NotEmpty(leaks);
        Assert.Single(leaks, f => f.Evidence.Contains("split-consistency check was not available", StringComparison.Ordinal));
        Assert.Contains("split-consistency check was not available", leaks[0].Evidence, StringComparison.Ordinal);
        Assert.All(run, a => Assert.True(a.Statistics.ShareGapPValue.IsDefaultOrEmpty));
    }

    [Fact]
    public void AMemorisedIdentifierFoundWithoutGivenCountsIsNeverALeak()
    {
        // The loop passes no TrainingValueCounts: the counts are those ProbeSet.Select took over every training row.
        var builder = new HistoryBuilder();
        var random = new Random(3);
        ProbeRows Source(int rows, long firstCrate)
        {
            var labels = Enumerable.Range(0, rows).Select(_ => (float)random.Next(2)).ToArray();
            var dense = Enumerable.Range(0, rows * 3).Select(_ => (float)random.NextDouble()).ToArray();
            var categorical = Enumerable.Range(0, rows).SelectMany(r => new[] { firstCrate + r, random.Next(4) }).ToArray();
            return new ProbeRows(dense, 3, categorical, 2, labels);
        }
        var probe = ProbeSet.Select(Source(300, 10_000), Source(800, 0), 128, 1);
        var counts = SplitCheckDocuments.ValueCounts(builder.Schema, probe, ImmutableDictionary<string, ImmutableDictionary<long, int>>.Empty)
            .ToDictionary(kv => kv.Key, kv => (IReadOnlyDictionary<long, int>)kv.Value);
        Assert.False(probe.SplitCheck!.Find(RawInputKind.Categorical, 0)!.Fails);

        // Memorised under label noise: the crate's attribution agrees with the training label on 80% of training rows.
        var run = builder.WithMemorisedCrate(fromEpoch: 1, agreement: 0.8).WithValueCounts(counts).WithSplitCheck(probe.SplitCheck).Run(8);
        Assert.True(new DivergenceDetector(builder.Context(), GatePolicy.Default).IdentifierLike[HistoryBuilder.Crate]);
        Assert.Contains(All(run), f => f.Kind == FindingKind.MemorisedIdentifier && f.Feature == "crate id");
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.Leak);
        Assert.DoesNotContain(All(run), f => f.Kind == FindingKind.OverfittedFeature && f.Feature == "crate id");
    }

    [Fact]
    public void TheHalfExchangeNullGivesUniformPValuesWithoutAPlantedFault()
    {
        var share = new List<double>();
        var alignment = new List<double>();
        var signs = Enumerable.Range(0, 256).Select(r => r % 2 == 1 ? 1.0 : -1.0).ToImmutableArray();
        for (int seed = 0; seed < 60; seed++)
        {
            var map = new HistoryBuilder().WithSeed(seed).Epoch(3).Map!;
            var (s, a) = new HalfExchangeNull(128, 128, 499, seed).PValues(map, signs);
            share.AddRange(s);
            alignment.AddRange(a);
        }
        AssertUniform(share, 499);
        AssertUniform(alignment, 499);
    }

    [Fact]
    public void TheHalfExchangeNullFindsAPlantedShareGap()
    {
        var map = new HistoryBuilder().WithLeak(0, fromEpoch: 0).Epoch(1).Map!;
        var (share, _) = new HalfExchangeNull(128, 128, 999, 1).PValues(map, null);
        Assert.Equal(1.0 / 1000, share[0], 12);
        Assert.All(share.Skip(1), p => Assert.True(p > 0.01, $"p = {p}"));
    }

    // Kolmogorov–Smirnov distance from uniform (MathNet.Numerics' ContinuousUniform as the reference CDF) below the
    // asymptotic α = 0.01 critical value 1.628 / √n (Smirnov 1948, from memory); p-values sit on the grid k / (B + 1).
    private static void AssertUniform(List<double> pValues, int permutations)
    {
        var uniform = new ContinuousUniform(0, 1);
        var sorted = pValues.Order().ToArray();
        int n = sorted.Length;
        double d = 0;
        for (int i = 0; i < n; i++)
        {
            d = Math.Max(d, Math.Abs((i + 1.0) / n - uniform.CumulativeDistribution(sorted[i])));
            d = Math.Max(d, Math.Abs((double)i / n - uniform.CumulativeDistribution(sorted[i] - 1.0 / (permutations + 1))));
        }
        Assert.True(d < 1.628 / Math.Sqrt(n), $"KS distance {d:0.000} over {n} p-values");
    }
}
