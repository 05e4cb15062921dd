namespace DriftWatch.Demo.Greenhouse;

/// <summary>Seeded draws shared by the generator.</summary>
internal static class Sampling
{
    /// <summary>An independent stream for (seed, purpose): changing one purpose's draws never shifts another's.</summary>
    public static Random Stream(int seed, int purpose)
    {
        // SplitMix64 finaliser over the pair, so nearby seeds and purposes give unrelated streams.
        ulong z = unchecked(((ulong)(uint)seed << 32) ^ (uint)purpose) + 0x9E3779B97F4A7C15UL;
        z = unchecked((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL);
        z = unchecked((z ^ (z >> 27)) * 0x94D049BB133111EBUL);
        z ^= z >> 31;
        return new Random((int)(z & 0x7FFFFFFF));
    }

    /// <summary>A normal draw (Box–Muller; one value per two uniforms, so the number of draws is fixed).</summary>
    public static double Normal(Random random, double mean, double deviation)
    {
        double u1 = 1.0 - random.NextDouble();
        double u2 = random.NextDouble();
        return mean + deviation * Math.Sqrt(-2.0 * Math.Log(u1)) * Math.Cos(2.0 * Math.PI * u2);
    }

    /// <summary>A normal draw clipped to a plausible range.</summary>
    public static double ClippedNormal(Random random, double mean, double deviation, double low, double high) =>
        Math.Clamp(Normal(random, mean, deviation), low, high);

    /// <summary>An index drawn with the given weights (which need not sum to 1).</summary>
    public static int Weighted(Random random, IReadOnlyList<double> weights)
    {
        double total = weights.Sum();
        double u = random.NextDouble() * total;
        for (int i = 0; i < weights.Count - 1; i++)
        {
            u -= weights[i];
            if (u < 0)
                return i;
        }
        return weights.Count - 1;
    }

    /// <summary>The logistic function.</summary>
    public static double Sigmoid(double x) => 1.0 / (1.0 + Math.Exp(-x));
}
