using System.Collections.Immutable;
using DriftWatch.Storage;

namespace DriftWatch.Hooks;

/// <summary>What a <see cref="TrainingMonitor"/> tells of its run, copied when asked: the run's identity in its store, its model and its progress.</summary>
/// <param name="Id">The run's id in the store, as the store's readers take it.</param>
/// <param name="Name">The run's name.</param>
/// <param name="StorePath">The full path of the store file.</param>
/// <param name="CreatedUtc">When the run was registered.</param>
/// <param name="ModelFactory">The stored name of the factory that rebuilds the run's model, or empty when none is known.</param>
/// <param name="ModelSettings">The settings that factory is given.</param>
/// <param name="ModelShape">The model's parameters with their shapes, or empty before the first model was checked.</param>
/// <param name="LastEpoch">The last complete epoch in the store, or −1 before the first.</param>
public sealed record MonitoredRun(
    int Id,
    string Name,
    string StorePath,
    DateTime CreatedUtc,
    string ModelFactory,
    ImmutableSortedDictionary<string, string> ModelSettings,
    string ModelShape,
    int LastEpoch)
{
    internal static MonitoredRun Of(RunDocument run, string storePath, int lastEpoch) => new(
        run.Id,
        run.Name,
        storePath,
        run.CreatedUtc,
        run.ModelFactory,
        ImmutableSortedDictionary.CreateRange(StringComparer.Ordinal, run.ModelSettings),
        run.ModelShape,
        lastEpoch);
}
