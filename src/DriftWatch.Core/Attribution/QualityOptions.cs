using System.Collections.Immutable;

namespace DriftWatch.Attribution;

/// <summary>How the quality figures of an epoch's maps are measured: infidelity and max-sensitivity on a seeded subsample of the probe set.</summary>
public sealed record QualityOptions
{
    /// <summary>Probe rows in the subsample, chosen by <see cref="Seed"/> from both halves. Default 32.</summary>
    public int SampleRows { get; init; } = 32;

    /// <summary>Random feature subsets removed per row for infidelity. Default 64.</summary>
    public int InfidelityPerturbations { get; init; } = 64;

    /// <summary>Probability that a feature is in a removed subset (set to the baseline). Default 0.5.</summary>
    public double RemovalProbability { get; init; } = 0.5;

    /// <summary>Perturbed copies per row whose maps are recomputed for max-sensitivity. Default 8.</summary>
    public int SensitivityPerturbations { get; init; } = 8;

    /// <summary>Radius of the max-sensitivity neighbourhood, per column as a fraction of its range over the probe rows. Default 0.02.</summary>
    public double SensitivityRadius { get; init; } = 0.02;

    /// <summary>Seed of the subsample and the perturbations. Default 0.</summary>
    public int Seed { get; init; }

    /// <summary>Checks every setting, naming the first bad one.</summary>
    /// <exception cref="DriftWatchException">A setting out of range.</exception>
    public void Validate()
    {
        if (SampleRows < 1 || SampleRows > 100_000)
            throw new DriftWatchException($"quality SampleRows must be between 1 and 100000; got {SampleRows}");
        if (InfidelityPerturbations < 1 || InfidelityPerturbations > 100_000)
            throw new DriftWatchException($"quality InfidelityPerturbations must be between 1 and 100000; got {InfidelityPerturbations}");
        if (!(RemovalProbability > 0 && RemovalProbability < 1))
            throw new DriftWatchException($"quality RemovalProbability must lie strictly between 0 and 1; got {MethodSettings.Text(RemovalProbability)}");
        if (SensitivityPerturbations < 0 || SensitivityPerturbations > 10_000)
            throw new DriftWatchException($"quality SensitivityPerturbations must be between 0 (off) and 10000; got {SensitivityPerturbations}");
        if (!(SensitivityRadius >= 0 && SensitivityRadius <= 1))
            throw new DriftWatchException($"quality SensitivityRadius must be between 0 and 1 (a fraction of each column's range); got {MethodSettings.Text(SensitivityRadius)}");
    }

    /// <summary>The settings as stored with the figures (invariant culture).</summary>
    public ImmutableSortedDictionary<string, string> ToSettings() => MethodSettings.Of(
        ("sample-rows", MethodSettings.Text(SampleRows)),
        ("infidelity-perturbations", MethodSettings.Text(InfidelityPerturbations)),
        ("removal-probability", MethodSettings.Text(RemovalProbability)),
        ("sensitivity-perturbations", MethodSettings.Text(SensitivityPerturbations)),
        ("sensitivity-radius", MethodSettings.Text(SensitivityRadius)),
        ("seed", MethodSettings.Text(Seed)));
}
