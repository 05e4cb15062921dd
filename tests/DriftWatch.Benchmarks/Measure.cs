using System.Diagnostics;

namespace DriftWatch.Benchmarks;

/// <summary>Timing helpers: medians over repeats, with the compared pieces interleaved so drift on a shared machine hits both.</summary>
internal static class Measure
{
    /// <summary>Median seconds of each action over <paramref name="repeats"/> interleaved rounds, after one warm-up round.</summary>
    public static double[] Interleaved(int repeats, params Action[] actions)
    {
        foreach (var action in actions)
            action();
        var samples = actions.Select(_ => new List<double>()).ToArray();
        for (int r = 0; r < repeats; r++)
        {
            for (int a = 0; a < actions.Length; a++)
            {
                var clock = Stopwatch.StartNew();
                actions[a]();
                samples[a].Add(clock.Elapsed.TotalSeconds);
            }
        }
        return samples.Select(Median).ToArray();
    }

    /// <summary>
    /// Two actions run alternately, <paramref name="repeats"/> rounds after warm-up rounds: the median seconds of each
    /// and the median over rounds of the ratio <paramref name="second"/> / <paramref name="first"/>. A ratio taken within
    /// one round is less disturbed by slow drift on a shared machine than a ratio of two medians.
    /// </summary>
    public static PairedTimes Paired(int repeats, Action first, Action second)
    {
        // Warm-up rounds, a tenth of the measured ones: the runtime recompiles hot methods after their first few dozen
        // calls, and the allocator settles on the sizes it is asked for.
        for (int w = 0; w < Math.Max(1, repeats / 10); w++)
        {
            first();
            second();
        }
        var a = new List<double>();
        var b = new List<double>();
        var ratios = new List<double>();
        for (int r = 0; r < repeats; r++)
        {
            var clock = Stopwatch.StartNew();
            first();
            double ta = clock.Elapsed.TotalSeconds;
            clock.Restart();
            second();
            double tb = clock.Elapsed.TotalSeconds;
            a.Add(ta);
            b.Add(tb);
            ratios.Add(tb / ta);
        }
        return new PairedTimes(Median(a), Median(b), Median(ratios));
    }

    /// <summary>Seconds one action takes, once.</summary>
    public static double Once(Action action)
    {
        var clock = Stopwatch.StartNew();
        action();
        return clock.Elapsed.TotalSeconds;
    }

    /// <summary>The median of a list.</summary>
    public static double Median(IReadOnlyList<double> values)
    {
        var sorted = values.Order().ToArray();
        return sorted.Length == 0 ? double.NaN
            : sorted.Length % 2 == 1 ? sorted[sorted.Length / 2]
            : (sorted[sorted.Length / 2 - 1] + sorted[sorted.Length / 2]) / 2;
    }
}

/// <summary>Medians of two alternating actions and of their per-round ratio.</summary>
/// <param name="First">Median seconds of the first action.</param>
/// <param name="Second">Median seconds of the second action.</param>
/// <param name="Ratio">Median over rounds of second / first.</param>
internal sealed record PairedTimes(double First, double Second, double Ratio);

/// <summary>One figure of the suite.</summary>
/// <param name="Group">Which benchmark (1–6).</param>
/// <param name="Name">What was measured.</param>
/// <param name="Value">The figure.</param>
/// <param name="Unit">Its unit ("ratio", "s", "rows", "evaluations", "bytes", …).</param>
/// <param name="Target">The target it is judged against, as text, or empty.</param>
/// <param name="Note">How it was measured.</param>
internal sealed record Figure(string Group, string Name, double Value, string Unit, string Target, string Note);
