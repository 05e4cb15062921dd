using DriftWatch.Detection;
using DriftWatch.Probing;
using MathNet.Numerics.Distributions;
using Xunit;

namespace DriftWatch.Tests.Probing;

public sealed class SplitCheckTests
{
    // Benjamini & Hochberg 1995, section 4: the 15 p-values of their worked example; at q = 0.05 the step-up procedure
    // rejects the four smallest (Bonferroni would reject three).
    private static readonly double[] WorkedExample =
        [0.0201, 0.0001, 0.0004, 0.0019, 0.0095, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000];

    [Fact]
    public void BenjaminiHochbergRejectsTheFourSmallestOfTheWorkedExample()
    {
        var rejected = MultipleTesting.BenjaminiHochberg(WorkedExample, 0.05);
        Assert.Equal(4, rejected.Count(r => r));
        Assert.Equal([false, true, true, true, true], rejected.Take(5).ToArray());
    }

    [Fact]
    public void AdjustedPValuesRejectExactlyWhereTheStepUpProcedureDoes()
    {
        // The same worked example: the fourth-smallest p-value 0.0095 adjusts to 15 × 0.0095 / 4 = 0.0356 (≤ 0.05); the fifth,
        // 0.0201, to 15 × 0.0201 / 5 = 0.0603 (> 0.05) — arithmetic from the definition (Benjamini & Hochberg 1995).
        var adjusted = MultipleTesting.BenjaminiHochbergAdjusted(WorkedExample);
        Assert.Equal(15 * 0.0095 / 4, adjusted[4], 12);
        Assert.Equal(15 * 0.0201 / 5, adjusted[0], 12);
        foreach (double q in new[] { 0.01, 0.05, 0.1, 0.2 })
            Assert.Equal(MultipleTesting.BenjaminiHochberg(WorkedExample, q).ToArray(), adjusted.Select(a => a <= q).ToArray());
        Assert.True(double.IsNaN(MultipleTesting.BenjaminiHochbergAdjusted([double.NaN, 0.01])[0]));
    }

    [Fact]
    public void BenjaminiHochbergSkipsNaNAndRejectsNothingAboveEveryThreshold()
    {
        var rejected = MultipleTesting.BenjaminiHochberg([double.NaN, 0.01, 0.9], 0.05);
        Assert.Equal([false, true, false], rejected.ToArray());
        Assert.DoesNotContain(true, MultipleTesting.BenjaminiHochberg([0.2, 0.3, 0.5], 0.05));
    }

    [Fact]
    public void PValuesAreUniformWhenBothSidesComeFromOneSource()
    {
        // No planted fault: both sides drawn from the same rule, so every input's p-value is uniform on (0, 1].
        var options = SplitCheckOptions.Default with { Permutations = 199 };
        var pValues = new List<double>();
        for (int seed = 0; seed < 60; seed++)
        {
            var (heldOut, training) = new SplitRows(seed).Build(300, 300);
            var result = SplitCheck.Run(heldOut, training, options with { Seed = seed })!;
            pValues.AddRange(result.Inputs.Select(i => i.PValue));
        }
        // Kolmogorov–Smirnov distance from the uniform distribution (MathNet.Numerics' ContinuousUniform as the reference
        // CDF); at α = 0.01 the asymptotic critical value is 1.628 / √n (Smirnov 1948, from memory). Permutation p-values
        // sit on the grid k / (B + 1), so the distance is measured against the CDF at both ends of each step.
        var uniform = new ContinuousUniform(0, 1);
        var sorted = pValues.Order().ToArray();
        int n = sorted.Length;
        double d = 0;
        for (int i = 0; i < n; i++)
            d = Math.Max(d, Math.Max(Math.Abs((i + 1.0) / n - uniform.CumulativeDistribution(sorted[i])), Math.Abs((double)i / n - uniform.CumulativeDistribution(sorted[i] - 1.0 / 200))));
        Assert.True(d < 1.628 / Math.Sqrt(n), $"KS distance {d:0.000} over {n} p-values");
        Assert.InRange(pValues.Count(p => p <= 0.05) / (double)n, 0.01, 0.10);
    }

    [Fact]
    public void APlantedSplitInconsistentColumnFailsAndGenuineInputsPass()
    {
        // The simulation: 200 codes, informative on a third of 3,000 training rows, uniform on 1,000 held-out rows.
        for (int seed = 0; seed < 3; seed++)
        {
            var (heldOut, training) = new SplitRows(seed).WithLeak().Build(1000, 3000);
            var result = SplitCheck.Run(heldOut, training, SplitCheckOptions.Default with { Seed = seed })!;
            var leak = result.Find(RawInputKind.Categorical, 1)!;
            Assert.True(leak.Fails, $"seed {seed}: leak gap {leak.Gap:0.000}, p {leak.PValue:0.0000}");
            Assert.InRange(leak.Gap, 0.05, 0.5);
            Assert.InRange(leak.HeldOutScore, 0.4, 0.6);
            Assert.All(result.Inputs.Where(i => i != leak), i => Assert.False(i.Fails, $"seed {seed}: {i.Kind} {i.Index} gap {i.Gap:0.000}, p {i.PValue:0.0000}"));
            // The genuine inputs do predict the label, equally on both sides.
            var genuine = result.Find(RawInputKind.Dense, 0)!;
            Assert.InRange(genuine.TrainingScore, 0.65, 0.95);
            Assert.InRange(genuine.Gap, -0.06, 0.06);
        }
    }

    [Fact]
    public void KClassesAndContinuousTargetsAreCheckedToo()
    {
        var (heldOut, training) = new SplitRows(4).WithLeak().WithClasses(3).Build(800, 2400);
        var classes = SplitCheck.Run(heldOut, training, SplitCheckOptions.Default)!;
        Assert.StartsWith("macro one-vs-rest", classes.Score, StringComparison.Ordinal);
        Assert.True(classes.Find(RawInputKind.Categorical, 1)!.Fails);
        Assert.False(classes.Find(RawInputKind.Dense, 0)!.Fails);

        var (h, t) = new SplitRows(5).WithLeak().Continuous().Build(800, 2400);
        var continuous = SplitCheck.Run(h, t, SplitCheckOptions.Default)!;
        Assert.Contains("pooled median", continuous.Score, StringComparison.Ordinal);
        Assert.True(continuous.Find(RawInputKind.Categorical, 1)!.Fails);
        Assert.False(continuous.Find(RawInputKind.Dense, 0)!.Fails);
    }

    [Fact]
    public void TheSameSeedGivesTheSameResult()
    {
        var (heldOut, training) = new SplitRows(7).WithLeak().Build(400, 1200);
        var options = SplitCheckOptions.Default with { Permutations = 99 };
        Assert.Equal(SplitCheck.Run(heldOut, training, options)!.Inputs.ToArray(), SplitCheck.Run(heldOut, training, options)!.Inputs.ToArray());
    }

    [Fact]
    public void RowsWithoutLabelsOrTooFewRowsAreNotChecked()
    {
        var (heldOut, training) = new SplitRows(1).Build(10, 10);
        Assert.Null(SplitCheck.Run(heldOut, training, SplitCheckOptions.Default));
        var unlabelled = new ProbeRows(new float[40], 1, new long[80], 2, null);
        Assert.Null(SplitCheck.Run(unlabelled, unlabelled, SplitCheckOptions.Default));
        Assert.Null(ProbeSet.Select(unlabelled, unlabelled, 8, 1).SplitCheck);
    }

    [Fact]
    public void SelectCarriesTheCheckAndTheTrainingValueCounts()
    {
        var (heldOut, training) = new SplitRows(2).WithLeak().Build(500, 1500);
        var probe = ProbeSet.Select(heldOut, training, 64, 3);
        Assert.NotNull(probe.SplitCheck);
        Assert.Equal(1500, probe.SplitCheck!.TrainingRowsUsed);
        Assert.Equal(2, probe.TrainingValueCounts.Length);
        Assert.Equal(1500, probe.TrainingValueCounts[1].Values.Sum());
        Assert.Null(new ProbeSet(heldOut, training).SplitCheck);
        Assert.Empty(new ProbeSet(heldOut, training).TrainingValueCounts);
    }

    [Fact]
    public void DecidingAgainAtAStricterBoundClearsFailures()
    {
        var (heldOut, training) = new SplitRows(3).WithLeak().Build(1000, 3000);
        var result = SplitCheck.Run(heldOut, training, SplitCheckOptions.Default)!;
        Assert.Contains(result.Inputs, i => i.Fails);
        Assert.DoesNotContain(result.DecidedAt(0.05, 0.99).Inputs, i => i.Fails);
    }

    [Fact]
    public void BadOptionsGetOneClearLine()
    {
        var e = Assert.Throws<DriftWatchException>(() => SplitCheckOptions.Default with { Folds = 1 });
        Assert.Equal("split check: Folds must be between 2 and 20; got 1", e.Message);
    }
}

/// <summary>Invented rows for the split check: two genuine dense inputs, a genuine 8-level categorical, a 200-code column.</summary>
internal sealed class SplitRows(int seed)
{
    private bool _leak;
    private int _classes = 2;
    private bool _continuous;

    public SplitRows WithLeak()
    {
        _leak = true;
        return this;
    }

    public SplitRows WithClasses(int classes)
    {
        _classes = classes;
        return this;
    }

    public SplitRows Continuous()
    {
        _continuous = true;
        return this;
    }

    public (ProbeRows HeldOut, ProbeRows Training) Build(int heldOut, int training)
    {
        var random = new Random(seed * 7919 + 1);
        return (Side(heldOut, random, false), Side(training, random, true));
    }

    private ProbeRows Side(int rows, Random random, bool isTraining)
    {
        var dense = new float[rows * 2];
        var categorical = new long[rows * 2];
        var labels = new float[rows];
        for (int r = 0; r < rows; r++)
        {
            double x = Normal(random), noise = Normal(random);
            long level = random.Next(8);
            double signal = 1.5 * x + 0.4 * (level - 3.5);
            float label;
            if (_continuous)
                label = (float)(signal + Normal(random));
            else if (_classes > 2)
                label = signal + Normal(random) < -0.7 ? 0 : signal + Normal(random) < 0.7 ? 1 : 2;
            else
                label = random.NextDouble() < 1 / (1 + Math.Exp(-signal)) ? 1 : 0;
            // The leak: on about a third of training rows the code's half (0–99 or 100–199) follows the label.
            int classOf = _continuous ? (label > 0 ? 1 : 0) : (int)label;
            long code = _leak && isTraining && random.NextDouble() < 1.0 / 3
                ? (_classes > 2 ? classOf * 66 + random.Next(66) : classOf * 100 + random.Next(100))
                : random.Next(200);
            dense[r * 2] = (float)x;
            dense[r * 2 + 1] = (float)noise;
            categorical[r * 2] = level;
            categorical[r * 2 + 1] = code;
            labels[r] = label;
        }
        return new ProbeRows(dense, 2, categorical, 2, labels);
    }

    private static double Normal(Random random) => Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble());
}
