using System.Collections.Immutable;

namespace DriftWatch.Storage;

/// <summary>A feature's importance over one half of the probe set, as stored with a map; every array is indexed by feature in schema order.</summary>
/// <param name="MeanAbsolute">Mean |score| per feature.</param>
/// <param name="MeanSigned">Mean signed score per feature.</param>
/// <param name="Share">Share of the half's total mean |score| per feature.</param>
/// <param name="Alignment">Label alignment per feature; empty when the half has no binary labels.</param>
public sealed record StoredHalfImportance(
    ImmutableArray<double> MeanAbsolute,
    ImmutableArray<double> MeanSigned,
    ImmutableArray<double> Share,
    ImmutableArray<double> Alignment)
{
    internal static StoredHalfImportance From(ImportanceDocument document) => new(
        [.. document.MeanAbsolute],
        [.. document.MeanSigned],
        [.. document.Share],
        document.Alignment is null ? [] : [.. document.Alignment]);
}

/// <summary>The per-half importance of one stored attribution map: (epoch, method, target), without its per-row scores.</summary>
/// <param name="Epoch">The epoch.</param>
/// <param name="Method">The name the map is stored under.</param>
/// <param name="Target">The attributed target.</param>
/// <param name="HeldOut">Importance over the held-out half.</param>
/// <param name="Training">Importance over the training half.</param>
public sealed record StoredImportance(int Epoch, string Method, string Target, StoredHalfImportance HeldOut, StoredHalfImportance Training)
{
    internal static StoredImportance From(MapDocument map) =>
        new(map.Epoch, map.Method, map.Target, StoredHalfImportance.From(map.HeldOut), StoredHalfImportance.From(map.Training));
}
