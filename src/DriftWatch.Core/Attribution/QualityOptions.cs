using System.Collections.Immutable;
using DriftWatch.Options;

namespace DriftWatch.Attribution;

/// <summary>How the quality figures of an epoch's maps are measured: infidelity and max-sensitivity on a seeded subsample of the probe set.</summary>
/// <remarks>Every setting is checked when it is set (<c>new</c> or <c>with</c>); a value out of range throws at once.</remarks>
public sealed record QualityOptions
{
    private static readonly IntegerRange SampleRowsRange = IntegerRange.Between(1, 100_000) with { Text = "between 1 and 100000" };
    private static readonly IntegerRange InfidelityPerturbationsRange = IntegerRange.Between(1, 100_000) with { Text = "between 1 and 100000" };
    private static readonly NumberRange RemovalProbabilityRange = NumberRange.Interval(0, false, 1, false) with { Rule = "must lie strictly between 0 and 1" };
    private static readonly IntegerRange SensitivityPerturbationsRange = IntegerRange.Between(0, 10_000) with { Text = "between 0 (off) and 10000" };
    private static readonly NumberRange SensitivityRadiusRange = NumberRange.Interval(0, true, 1, true) with { Text = "between 0 and 1 (a fraction of each column's range)" };

    /// <summary>Probe rows in the subsample, chosen by <see cref="Seed"/> from both halves, 1 to 100000. Default 32.</summary>
    /// <exception cref="DriftWatchException">Out of range.</exception>
    public int SampleRows { get; init => field = SampleRowsRange.Check(value, "quality SampleRows"); } = 32;

    /// <summary>Random feature subsets removed per row for infidelity, 1 to 100000. Default 64.</summary>
    /// <exception cref="DriftWatchException">Out of range.</exception>
    public int InfidelityPerturbations { get; init => field = InfidelityPerturbationsRange.Check(value, "quality InfidelityPerturbations"); } = 64;

    /// <summary>Probability that a feature is in a removed subset (set to the baseline), strictly between 0 and 1. Default 0.5.</summary>
    /// <exception cref="DriftWatchException">Out of range.</exception>
    public double RemovalProbability { get; init => field = RemovalProbabilityRange.Check(value, "quality RemovalProbability"); } = 0.5;

    /// <summary>Perturbed copies per row whose maps are recomputed for max-sensitivity, 0 (off) to 10000. Default 8.</summary>
    /// <exception cref="DriftWatchException">Out of range.</exception>
    public int SensitivityPerturbations { get; init => field = SensitivityPerturbationsRange.Check(value, "quality SensitivityPerturbations"); } = 8;

    /// <summary>Radius of the max-sensitivity neighbourhood, per column as a fraction of its range over the probe rows, 0 to 1. Default 0.02.</summary>
    /// <exception cref="DriftWatchException">Out of range.</exception>
    public double SensitivityRadius { get; init => field = SensitivityRadiusRange.Check(value, "quality SensitivityRadius"); } = 0.02;

    /// <summary>Seed of the subsample and the perturbations. Default 0.</summary>
    public int Seed { get; init; }

    /// <summary>Checks every setting again, naming every bad one; each is already checked when it is set, so options built by <c>new</c> or <c>with</c> always pass.</summary>
    /// <exception cref="DriftWatchException">Settings out of range, all named on one line.</exception>
    public void Validate()
    {
        var problems = new Problems();
        problems.Try(() => SampleRowsRange.Check(SampleRows, "quality SampleRows"));
        problems.Try(() => InfidelityPerturbationsRange.Check(InfidelityPerturbations, "quality InfidelityPerturbations"));
        problems.Try(() => RemovalProbabilityRange.Check(RemovalProbability, "quality RemovalProbability"));
        problems.Try(() => SensitivityPerturbationsRange.Check(SensitivityPerturbations, "quality SensitivityPerturbations"));
        problems.Try(() => SensitivityRadiusRange.Check(SensitivityRadius, "quality SensitivityRadius"));
        problems.ThrowIfAny();
    }
    /// <summary>The settings as stored with the figures (invariant culture).</summary>
    public ImmutableSortedDictionary<string, string> ToSettings() => MethodSettingsReader.Of(
        ("sample-rows", MethodSettingsReader.Text(SampleRows)),
        ("infidelity-perturbations", MethodSettingsReader.Text(InfidelityPerturbations)),
        ("removal-probability", MethodSettingsReader.Text(RemovalProbability)),
        ("sensitivity-perturbations", MethodSettingsReader.Text(SensitivityPerturbations)),
        ("sensitivity-radius", MethodSettingsReader.Text(SensitivityRadius)),
        ("seed", MethodSettingsReader.Text(Seed)));
}
