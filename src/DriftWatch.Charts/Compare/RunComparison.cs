using System.Collections.Immutable;
using DriftWatch.Charts.Report;
using DriftWatch.Detection;

namespace DriftWatch.Charts.Compare;

/// <summary>Two runs at one epoch both attributed: each common feature's held-out share in each, and how alike their rankings are.</summary>
/// <param name="Epoch">The epoch.</param>
/// <param name="SharesA">Held-out share of each common feature in run A, in <see cref="RunComparison.Features"/> order.</param>
/// <param name="SharesB">The same in run B.</param>
/// <param name="HeldOutSpearman">Spearman ρ between the two runs' held-out shares over the common features; NaN with fewer than two.</param>
/// <param name="TrainingSpearman">Spearman ρ between the two runs' training-half shares.</param>
public sealed record EpochComparison(int Epoch, ImmutableArray<double> SharesA, ImmutableArray<double> SharesB, double HeldOutSpearman, double TrainingSpearman);

/// <summary>Two runs side by side: shares at matching epochs, rank correlation per epoch, and findings only one run has.</summary>
public sealed class RunComparison
{
    private RunComparison(RunHistory a, RunHistory b, ImmutableArray<string> features, ImmutableArray<EpochComparison> epochs, ImmutableArray<FindingSummary> onlyA, ImmutableArray<FindingSummary> onlyB)
    {
        A = a;
        B = b;
        Features = features;
        Epochs = epochs;
        OnlyInA = onlyA;
        OnlyInB = onlyB;
    }

    /// <summary>The first run.</summary>
    public RunHistory A { get; }

    /// <summary>The second run.</summary>
    public RunHistory B { get; }

    /// <summary>Features both runs have, in run A's schema order; the correlations are over these.</summary>
    public ImmutableArray<string> Features { get; }

    /// <summary>Features only run A has.</summary>
    public ImmutableArray<string> FeaturesOnlyInA => [.. A.FeatureNames.Except(Features, StringComparer.Ordinal)];

    /// <summary>Features only run B has.</summary>
    public ImmutableArray<string> FeaturesOnlyInB => [.. B.FeatureNames.Except(Features, StringComparer.Ordinal)];

    /// <summary>Epochs attributed in both runs, in order.</summary>
    public ImmutableArray<EpochComparison> Epochs { get; }

    /// <summary>Findings (kind and feature) that run A raised at some epoch and run B never did.</summary>
    public ImmutableArray<FindingSummary> OnlyInA { get; }

    /// <summary>Findings that run B raised and run A never did.</summary>
    public ImmutableArray<FindingSummary> OnlyInB { get; }

    /// <summary>Compares <paramref name="a"/> with <paramref name="b"/>.</summary>
    public static RunComparison Of(RunHistory a, RunHistory b)
    {
        ArgumentNullException.ThrowIfNull(a);
        ArgumentNullException.ThrowIfNull(b);
        var common = a.FeatureNames.Where(n => b.FeatureNames.Contains(n, StringComparer.Ordinal)).Distinct(StringComparer.Ordinal).ToImmutableArray();
        var indexA = common.Select(a.FeatureIndex).ToArray();
        var indexB = common.Select(b.FeatureIndex).ToArray();
        var byEpochB = b.Epochs.Where(e => e.IsAttributed).ToDictionary(e => e.Epoch);
        var epochs = a.Epochs
            .Where(e => e.IsAttributed && byEpochB.ContainsKey(e.Epoch))
            .Select(ea =>
            {
                var eb = byEpochB[ea.Epoch];
                double[] heldOutA = [.. indexA.Select(i => ea.HeldOutShare[i])];
                double[] heldOutB = [.. indexB.Select(i => eb.HeldOutShare[i])];
                double[] trainingA = [.. indexA.Select(i => ea.TrainingShare[i])];
                double[] trainingB = [.. indexB.Select(i => eb.TrainingShare[i])];
                return new EpochComparison(ea.Epoch, [.. heldOutA], [.. heldOutB], Spearman(heldOutA, heldOutB), Spearman(trainingA, trainingB));
            })
            .ToImmutableArray();
        var findingsA = RunFindings.Summarise(a);
        var findingsB = RunFindings.Summarise(b);
        var keysA = findingsA.Select(f => (f.Kind, f.Feature)).ToHashSet();
        var keysB = findingsB.Select(f => (f.Kind, f.Feature)).ToHashSet();
        return new RunComparison(
            a,
            b,
            common,
            epochs,
            [.. findingsA.Where(f => !keysB.Contains((f.Kind, f.Feature)))],
            [.. findingsB.Where(f => !keysA.Contains((f.Kind, f.Feature)))]);
    }

    /// <summary>The features to show side by side: the top ones by held-out share at the last matching epoch in either run, at most <paramref name="count"/>.</summary>
    public IReadOnlyList<int> TopFeatures(int count)
    {
        if (Epochs.IsEmpty)
            return [];
        var last = Epochs[^1];
        var rankA = Enumerable.Range(0, Features.Length).OrderByDescending(i => Finite(last.SharesA[i])).ThenBy(i => i).ToList();
        var rankB = Enumerable.Range(0, Features.Length).OrderByDescending(i => Finite(last.SharesB[i])).ThenBy(i => i).ToList();
        // Alternate between the runs' rankings, so a feature that leads in only one run is shown too.
        return rankA.Zip(rankB).SelectMany(p => new[] { p.First, p.Second }).Distinct().Take(count).ToList();
    }

    private static double Finite(double value) => double.IsFinite(value) ? value : double.NegativeInfinity;

    // Spearman ρ with average ranks for ties (Spearman 1904); NaN when either side is constant or has fewer than two values.
    private static double Spearman(double[] x, double[] y) =>
        x.Length < 2 || x.Any(v => !double.IsFinite(v)) || y.Any(v => !double.IsFinite(v)) ? double.NaN : Statistics.Spearman(x, y);
}
