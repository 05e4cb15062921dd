using System.Collections.Immutable;

namespace DriftWatch.Storage;

/// <summary>A run as a program embedding the library reads it from a store.</summary>
/// <param name="Id">The run's id in the store (what <see cref="RunStore.StoredVerdicts"/> and <see cref="RunStore.Importance"/> take).</param>
/// <param name="Name">The run's name.</param>
/// <param name="CreatedUtc">When the run was registered.</param>
/// <param name="Features">The feature names, in schema order.</param>
/// <param name="Methods">The configured attribution methods' names, the one the verdict reads first.</param>
/// <param name="HeldOutRows">Probe rows in the held-out half.</param>
/// <param name="TrainingRows">Probe rows in the training half.</param>
public sealed record StoredRun(int Id, string Name, DateTime CreatedUtc, ImmutableArray<string> Features, ImmutableArray<string> Methods, int HeldOutRows, int TrainingRows)
{
    internal static StoredRun From(RunDocument run) => new(
        run.Id, run.Name, run.CreatedUtc, [.. run.Features.Select(f => f.Name)], [.. run.Methods.Select(m => m.Name)], run.HeldOutRows, run.TrainingRows);
}

/// <summary>One complete epoch of a run as stored: the loop's metrics and the monitor's problems.</summary>
/// <param name="Epoch">The epoch.</param>
/// <param name="Metrics">Metrics by stored key (<see cref="MetricKeys"/>).</param>
/// <param name="Problems">What failed in monitoring at this epoch (the training went on); empty when nothing did.</param>
public sealed record StoredEpoch(int Epoch, ImmutableSortedDictionary<string, double> Metrics, ImmutableArray<string> Problems)
{
    internal static StoredEpoch From(EpochDocument epoch) => new(
        epoch.Epoch, epoch.Metrics.ToImmutableSortedDictionary(StringComparer.Ordinal), [.. epoch.Problems]);
}
