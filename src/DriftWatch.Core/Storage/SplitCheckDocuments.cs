using System.Collections.Immutable;
using DriftWatch.Model;
using DriftWatch.Probing;

namespace DriftWatch.Storage;

/// <summary>The split-consistency check and the training value counts in their stored form and back.</summary>
internal static class SplitCheckDocuments
{
    public static SplitCheckDocument? From(SplitCheckResult? result) => result is null ? null : new SplitCheckDocument
    {
        Score = result.Score,
        TrainingRowsUsed = result.TrainingRowsUsed,
        HeldOutRowsUsed = result.HeldOutRowsUsed,
        Permutations = result.Permutations,
        FalseDiscoveryRate = result.FalseDiscoveryRate,
        MinimumGap = result.MinimumGap,
        Inputs = [.. result.Inputs.Select(i => new SplitCheckInputDocument
        {
            Kind = i.Kind.ToString(),
            Index = i.Index,
            TrainingScore = i.TrainingScore,
            HeldOutScore = i.HeldOutScore,
            PValue = i.PValue,
            NullUpper = i.NullUpper,
            Fails = i.Fails,
        })],
    };

    public static SplitCheckResult? ToResult(SplitCheckDocument? document) => document is null ? null : new SplitCheckResult(
        document.Score,
        document.TrainingRowsUsed,
        document.HeldOutRowsUsed,
        document.Permutations,
        document.FalseDiscoveryRate,
        document.MinimumGap,
        [.. document.Inputs.Select(i => new SplitCheckInput(Enum.Parse<RawInputKind>(i.Kind), i.Index, i.TrainingScore, i.HeldOutScore, i.PValue, i.NullUpper, i.Fails))]);

    /// <summary>
    /// The training value counts a run stores: the caller's when given, else those <see cref="ProbeSet.Select(ProbeRows, ProbeRows, int, int)"/>
    /// counted over every training row, named through the schema's categorical features.
    /// </summary>
    public static ImmutableDictionary<string, ImmutableDictionary<long, int>> ValueCounts(
        FeatureSchema schema, ProbeSet probe, ImmutableDictionary<string, ImmutableDictionary<long, int>> given)
    {
        if (given.Count > 0 || probe.TrainingValueCounts.IsDefaultOrEmpty)
            return given;
        var names = schema.Features.Where(f => f.Kind == FeatureKind.Categorical).Select(f => f.Name).ToArray();
        var counts = ImmutableDictionary.CreateBuilder<string, ImmutableDictionary<long, int>>(StringComparer.Ordinal);
        for (int c = 0; c < Math.Min(names.Length, probe.TrainingValueCounts.Length); c++)
            counts[names[c]] = probe.TrainingValueCounts[c];
        return counts.ToImmutable();
    }

    /// <summary>Training rows per value of each categorical, counted on the probe's training half alone (when nothing else counted them).</summary>
    public static ImmutableDictionary<string, ImmutableDictionary<long, int>> CountProbeTrainingHalf(FeatureSchema schema, ProbeSet probe)
    {
        var names = schema.Features.Where(f => f.Kind == FeatureKind.Categorical).Select(f => f.Name).ToArray();
        var counts = ImmutableDictionary.CreateBuilder<string, ImmutableDictionary<long, int>>(StringComparer.Ordinal);
        int width = probe.Rows.CategoricalCount;
        for (int c = 0; c < Math.Min(names.Length, width); c++)
        {
            var values = new Dictionary<long, int>();
            for (int r = probe.HeldOutCount; r < probe.Count; r++)
            {
                long v = probe.Rows.Categorical[r * width + c];
                values[v] = values.GetValueOrDefault(v) + 1;
            }
            counts[names[c]] = values.ToImmutableDictionary();
        }
        return counts.ToImmutable();
    }
}
