using System.Collections.Immutable;
using DriftWatch.Probing;

namespace DriftWatch.Attribution;

/// <summary>A feature's importance aggregated over one half of the probe set.</summary>
/// <remarks>All arrays are indexed by feature.</remarks>
public sealed record HalfImportance
{
    /// <summary>Mean |score| per feature.</summary>
    public required ImmutableArray<double> MeanAbsolute { get; init; }

    /// <summary>Mean signed score per feature.</summary>
    public required ImmutableArray<double> MeanSigned { get; init; }

    /// <summary>Share of the half's total mean |score| per feature; sums to 1 unless every score is 0.</summary>
    public required ImmutableArray<double> Share { get; init; }

    /// <summary>Label alignment per feature: mean(score × sign) / mean |score|, in [−1, 1], the sign read from the row's label and the target (<see cref="LabelKinds.AlignmentSigns(IReadOnlyList{float}?, Model.AttributionTarget?)"/>); null when no sign can be read.</summary>
    public ImmutableArray<double>? Alignment { get; init; }

    /// <summary>Aggregates the rows <paramref name="rows"/> of <paramref name="map"/>.</summary>
    /// <param name="map">The attribution map.</param>
    /// <param name="rows">The rows of the half.</param>
    /// <param name="labels">Labels of every probe row; alignment is computed only when they are binary (0/1 or ±1, <see cref="LabelKinds"/>).</param>
    public static HalfImportance Compute(AttributionMap map, IReadOnlyList<int> rows, float[]? labels) =>
        WithSigns(map, rows, LabelKinds.AlignmentSigns(labels));

    /// <summary>Aggregates the rows <paramref name="rows"/> of <paramref name="map"/>, aligning each row's scores with its sign.</summary>
    /// <param name="map">The attribution map.</param>
    /// <param name="rows">The rows of the half.</param>
    /// <param name="signs">The direction each probe row's label points a score (see <see cref="LabelKinds.AlignmentSigns(IReadOnlyList{float}?, Model.AttributionTarget?)"/>), or null for no alignment.</param>
    public static HalfImportance WithSigns(AttributionMap map, IReadOnlyList<int> rows, IReadOnlyList<double>? signs)
    {
        ArgumentNullException.ThrowIfNull(map);
        ArgumentNullException.ThrowIfNull(rows);
        int f = map.Features;
        var abs = new double[f];
        var signed = new double[f];
        double[]? aligned = signs is null ? null : new double[f];
        foreach (int r in rows)
        {
            double sign = signs is null ? 0 : signs[r];
            for (int j = 0; j < f; j++)
            {
                double v = map[r, j];
                abs[j] += Math.Abs(v);
                signed[j] += v;
                if (aligned is not null)
                    aligned[j] += v * sign;
            }
        }
        int n = Math.Max(1, rows.Count);
        double total = 0;
        for (int j = 0; j < f; j++)
        {
            abs[j] /= n;
            signed[j] /= n;
            total += abs[j];
        }
        var share = abs.Select(a => total > 0 ? a / total : 0).ToArray();
        double[]? alignment = aligned?.Select((a, j) => abs[j] > 0 ? a / n / abs[j] : 0).ToArray();
        return new HalfImportance { MeanAbsolute = [.. abs], MeanSigned = [.. signed], Share = [.. share], Alignment = alignment is null ? null : [.. alignment] };
    }

    /// <summary>Aggregates both halves of a probe set, aligning with the labels' direction for <paramref name="target"/> (null: the logit).</summary>
    public static (HalfImportance HeldOut, HalfImportance Training) ForHalves(AttributionMap map, ProbeSet probe, Model.AttributionTarget? target = null)
    {
        ArgumentNullException.ThrowIfNull(map);
        ArgumentNullException.ThrowIfNull(probe);
        var heldOut = Enumerable.Range(0, probe.HeldOutCount).ToArray();
        var training = Enumerable.Range(probe.HeldOutCount, probe.TrainingCount).ToArray();
        var signs = LabelKinds.AlignmentSigns(probe.Rows.Labels, target);
        return (WithSigns(map, heldOut, signs), WithSigns(map, training, signs));
    }
}
