using DriftWatch.Model;

namespace DriftWatch.Demo.Greenhouse;

/// <summary>What a feature of the greenhouse scenario really is, as the generator planted it.</summary>
public enum FeatureRole
{
    /// <summary>Takes part in the known grading rule.</summary>
    Genuine,

    /// <summary>Carries the grade itself (the inspection tray written after grading); the model should not lean on it.</summary>
    Leaked,

    /// <summary>A near-unique identifier the model can use to memorise training labels.</summary>
    MemorisableIdentifier,

    /// <summary>Carries no information about the grade.</summary>
    Noise,
}

/// <summary>The ground truth about one feature of a generated scenario.</summary>
/// <param name="Name">The feature's name, as in the model's schema.</param>
/// <param name="Kind">Dense or categorical.</param>
/// <param name="Role">What the generator made it.</param>
/// <param name="Levels">Number of ids for a categorical feature (0 for dense).</param>
/// <param name="Unit">Unit of a dense feature's raw value, e.g. <c>°C</c>; empty for categoricals.</param>
/// <param name="Description">One plain sentence on how the values were drawn.</param>
public sealed record FeatureTruth(string Name, FeatureKind Kind, FeatureRole Role, int Levels, string Unit, string Description)
{
    /// <summary>Whether a detector should name this feature: it is leaked or a memorisable identifier.</summary>
    public bool ShouldBeFlagged => Role is FeatureRole.Leaked or FeatureRole.MemorisableIdentifier;
}
