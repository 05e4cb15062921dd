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

/// <summary>One figure of the suite.</summary>
/// <param name="Group">Which benchmark (1–6).</param>
/// <param name="Name">What was measured.</param>
/// <param name="Value">The figure.</param>
/// <param name="Unit">Its unit ("ratio", "s", "rows", "evaluations", "bytes", …).</param>
/// <param name="Target">The target it is judged against, as text, or empty.</param>
/// <param name="Note">How it was measured.</param>
internal sealed record Figure(string Group, string Name, double Value, string Unit, string Target, string Note);
