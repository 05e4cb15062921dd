using System.Collections.Immutable;

namespace DriftWatch.Detection;

/// <summary>Error-rate control across several tests at once.</summary>
public static class MultipleTesting
{
    /// <summary>
    /// Which hypotheses the Benjamini–Hochberg step-up procedure rejects at false discovery rate <paramref name="q"/>
    /// (Benjamini &amp; Hochberg 1995): with the p-values sorted, p₍₁₎ ≤ … ≤ p₍ₘ₎, reject the k smallest for the largest k with
    /// p₍ₖ₎ ≤ k q / m. A NaN p-value is never rejected and does not count towards m.
    /// </summary>
    /// <param name="pValues">One p-value per hypothesis.</param>
    /// <param name="q">The false discovery rate, in (0, 1).</param>
    public static ImmutableArray<bool> BenjaminiHochberg(IReadOnlyList<double> pValues, double q)
    {
        ArgumentNullException.ThrowIfNull(pValues);
        if (!(q > 0 && q < 1))
            throw new ArgumentOutOfRangeException(nameof(q), q, "the false discovery rate must be in (0, 1)");
        var tested = Enumerable.Range(0, pValues.Count).Where(i => !double.IsNaN(pValues[i])).OrderBy(i => pValues[i]).ThenBy(i => i).ToArray();
        int m = tested.Length, passing = 0;
        for (int k = 1; k <= m; k++)
        {
            if (pValues[tested[k - 1]] <= k * q / m)
                passing = k;
        }
        var rejected = new bool[pValues.Count];
        for (int k = 0; k < passing; k++)
            rejected[tested[k]] = true;
        return [.. rejected];
    }

    /// <summary>
    /// Benjamini–Hochberg adjusted p-values (Benjamini &amp; Hochberg 1995; the step-up "q-values" of common practice):
    /// p̃₍ₖ₎ = min over j ≥ k of min(1, m p₍ⱼ₎ / j). A hypothesis is rejected at rate q by <see cref="BenjaminiHochberg"/>
    /// exactly when its adjusted p-value is at most q. NaN stays NaN and does not count towards m.
    /// </summary>
    /// <param name="pValues">One p-value per hypothesis.</param>
    public static ImmutableArray<double> BenjaminiHochbergAdjusted(IReadOnlyList<double> pValues)
    {
        ArgumentNullException.ThrowIfNull(pValues);
        var tested = Enumerable.Range(0, pValues.Count).Where(i => !double.IsNaN(pValues[i])).OrderBy(i => pValues[i]).ThenBy(i => i).ToArray();
        int m = tested.Length;
        var adjusted = Enumerable.Repeat(double.NaN, pValues.Count).ToArray();
        double running = 1;
        for (int k = m; k >= 1; k--)
        {
            running = Math.Min(running, Math.Min(1, m * pValues[tested[k - 1]] / k));
            adjusted[tested[k - 1]] = running;
        }
        return [.. adjusted];
    }

    /// <summary>The permutation p-value (1 + #null ≥ observed) / (B + 1), which is never zero (Phipson &amp; Smyth 2010).</summary>
    /// <param name="exceeding">How many of the B null statistics are at least the observed one.</param>
    /// <param name="permutations">B, the number of null statistics.</param>
    public static double PermutationPValue(int exceeding, int permutations)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(exceeding);
        ArgumentOutOfRangeException.ThrowIfLessThan(permutations, exceeding);
        return (1.0 + exceeding) / (permutations + 1.0);
    }
}
