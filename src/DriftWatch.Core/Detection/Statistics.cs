namespace DriftWatch.Detection;

/// <summary>The statistics the detector and the charts use, written out so their definitions are visible.</summary>
public static class Statistics
{
    /// <summary>Ranks 1..n with ties given their average rank.</summary>
    public static double[] AverageRanks(IReadOnlyList<double> values)
    {
        ArgumentNullException.ThrowIfNull(values);
        int n = values.Count;
        var order = Enumerable.Range(0, n).OrderBy(i => values[i]).ToArray();
        var ranks = new double[n];
        int start = 0;
        while (start < n)
        {
            int end = start;
            while (end + 1 < n && values[order[end + 1]] == values[order[start]])
                end++;
            double rank = (start + end) / 2.0 + 1;
            for (int k = start; k <= end; k++)
                ranks[order[k]] = rank;
            start = end + 1;
        }
        return ranks;
    }

    /// <summary>Pearson's correlation; NaN when either series is constant.</summary>
    public static double Pearson(IReadOnlyList<double> x, IReadOnlyList<double> y)
    {
        ArgumentNullException.ThrowIfNull(x);
        ArgumentNullException.ThrowIfNull(y);
        if (x.Count != y.Count)
            throw new ArgumentException($"series lengths differ: {x.Count} and {y.Count}", nameof(y));
        double mx = x.Average(), my = y.Average();
        double sxy = 0, sxx = 0, syy = 0;
        for (int i = 0; i < x.Count; i++)
        {
            double dx = x[i] - mx, dy = y[i] - my;
            sxy += dx * dy;
            sxx += dx * dx;
            syy += dy * dy;
        }
        return sxx == 0 || syy == 0 ? double.NaN : sxy / Math.Sqrt(sxx * syy);
    }

    /// <summary>Spearman's rank correlation ρ (Pearson's r of average ranks, so ties are handled).</summary>
    public static double Spearman(IReadOnlyList<double> x, IReadOnlyList<double> y) => Pearson(AverageRanks(x), AverageRanks(y));

    /// <summary>Kendall's τ-b, corrected for ties in either series.</summary>
    public static double KendallTauB(IReadOnlyList<double> x, IReadOnlyList<double> y)
    {
        ArgumentNullException.ThrowIfNull(x);
        ArgumentNullException.ThrowIfNull(y);
        if (x.Count != y.Count)
            throw new ArgumentException($"series lengths differ: {x.Count} and {y.Count}", nameof(y));
        long concordant = 0, discordant = 0, tiesX = 0, tiesY = 0;
        for (int i = 0; i < x.Count; i++)
        {
            for (int j = i + 1; j < x.Count; j++)
            {
                int sx = Math.Sign(x[i] - x[j]), sy = Math.Sign(y[i] - y[j]);
                if (sx == 0 && sy == 0)
                    continue;
                if (sx == 0)
                    tiesX++;
                else if (sy == 0)
                    tiesY++;
                else if (sx == sy)
                    concordant++;
                else
                    discordant++;
            }
        }
        double denominator = Math.Sqrt((double)(concordant + discordant + tiesX) * (concordant + discordant + tiesY));
        return denominator == 0 ? double.NaN : (concordant - discordant) / denominator;
    }

    /// <summary>Jensen–Shannon divergence (natural log) between two distributions; 0 when equal, at most ln 2 (Lin 1991).</summary>
    /// <remarks>Inputs are normalised to sum to 1; negative entries are not allowed.</remarks>
    public static double JensenShannon(IReadOnlyList<double> p, IReadOnlyList<double> q)
    {
        ArgumentNullException.ThrowIfNull(p);
        ArgumentNullException.ThrowIfNull(q);
        if (p.Count != q.Count)
            throw new ArgumentException($"distributions differ in length: {p.Count} and {q.Count}", nameof(q));
        double sp = p.Sum(), sq = q.Sum();
        if (p.Any(v => v < 0) || q.Any(v => v < 0) || sp <= 0 || sq <= 0)
            throw new ArgumentException("distributions must be non-negative with a positive total");
        double divergence = 0;
        for (int i = 0; i < p.Count; i++)
        {
            double a = p[i] / sp, b = q[i] / sq, m = (a + b) / 2;
            if (a > 0)
                divergence += 0.5 * a * Math.Log(a / m);
            if (b > 0)
                divergence += 0.5 * b * Math.Log(b / m);
        }
        return Math.Max(0, divergence);
    }

    /// <summary>Jaccard similarity of the top-k index sets of two score vectors.</summary>
    public static double TopKJaccard(IReadOnlyList<double> a, IReadOnlyList<double> b, int k)
    {
        ArgumentNullException.ThrowIfNull(a);
        ArgumentNullException.ThrowIfNull(b);
        ArgumentOutOfRangeException.ThrowIfLessThan(k, 1);
        var top = (IReadOnlyList<double> v) => Enumerable.Range(0, v.Count).OrderByDescending(i => v[i]).ThenBy(i => i).Take(k).ToHashSet();
        var ta = top(a);
        var tb = top(b);
        int union = ta.Union(tb).Count();
        return union == 0 ? 1 : (double)ta.Intersect(tb).Count() / union;
    }

    /// <summary>Wilson score interval's lower bound for k successes in n trials (Wilson 1927).</summary>
    /// <param name="successes">k.</param>
    /// <param name="trials">n; 0 gives 0.</param>
    /// <param name="z">Normal quantile; 1.96 for a two-sided 95% interval.</param>
    public static double WilsonLowerBound(int successes, int trials, double z = 1.96)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(successes);
        ArgumentOutOfRangeException.ThrowIfGreaterThan(successes, trials);
        if (trials == 0)
            return 0;
        double p = (double)successes / trials, z2 = z * z;
        double centre = p + z2 / (2 * trials);
        double spread = z * Math.Sqrt(p * (1 - p) / trials + z2 / (4.0 * trials * trials));
        return (centre - spread) / (1 + z2 / trials);
    }

    /// <summary>Prechelt's generalisation loss GL(t) = 100 · (E_va(t) / min_{t′≤t} E_va(t′) − 1), for every t.</summary>
    public static double[] GeneralisationLoss(IReadOnlyList<double> validationLoss)
    {
        ArgumentNullException.ThrowIfNull(validationLoss);
        var result = new double[validationLoss.Count];
        double best = double.PositiveInfinity;
        for (int t = 0; t < validationLoss.Count; t++)
        {
            if (double.IsFinite(validationLoss[t]))
                best = Math.Min(best, validationLoss[t]);
            result[t] = double.IsFinite(validationLoss[t]) && best > 0 && double.IsFinite(best)
                ? 100 * (validationLoss[t] / best - 1)
                : double.NaN;
        }
        return result;
    }

    /// <summary>The linear-interpolated quantile q ∈ [0, 1] of the values (sorts a copy).</summary>
    public static double Quantile(IEnumerable<double> values, double q)
    {
        ArgumentNullException.ThrowIfNull(values);
        var sorted = values.Where(double.IsFinite).Order().ToArray();
        if (sorted.Length == 0)
            return double.NaN;
        double position = q * (sorted.Length - 1);
        int low = (int)Math.Floor(position);
        int high = Math.Min(sorted.Length - 1, low + 1);
        return sorted[low] + (position - low) * (sorted[high] - sorted[low]);
    }
}

/// <summary>Tabular CUSUM (Page 1954) for upward and downward shifts of a series from a target mean.</summary>
/// <remarks>
/// C⁺_t = max(0, x_t − (μ₀ + K) + C⁺_{t−1}), C⁻_t = max(0, (μ₀ − K) − x_t + C⁻_{t−1}); an alarm when either exceeds H.
/// K and H are in the series' units (commonly K = σ/2, H = 5σ).
/// </remarks>
public sealed class Cusum
{
    /// <summary>Creates the chart.</summary>
    /// <param name="target">μ₀, the in-control mean.</param>
    /// <param name="allowance">K, the slack before a deviation accumulates.</param>
    /// <param name="threshold">H, the decision interval.</param>
    public Cusum(double target, double allowance, double threshold)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(allowance);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(threshold);
        Target = target;
        Allowance = allowance;
        Threshold = threshold;
    }

    /// <summary>μ₀.</summary>
    public double Target { get; }

    /// <summary>K.</summary>
    public double Allowance { get; }

    /// <summary>H.</summary>
    public double Threshold { get; }

    /// <summary>C⁺ after the last observation.</summary>
    public double Upper { get; private set; }

    /// <summary>C⁻ after the last observation.</summary>
    public double Lower { get; private set; }

    /// <summary>Adds one observation; returns true when either sum exceeds the threshold.</summary>
    public bool Add(double value)
    {
        Upper = Math.Max(0, value - (Target + Allowance) + Upper);
        Lower = Math.Max(0, (Target - Allowance) - value + Lower);
        return Upper > Threshold || Lower > Threshold;
    }
}
