namespace DriftWatch.Demo.Greenhouse;

/// <summary>The ready-made scenarios of the demo; <see cref="ScenarioBuilder.For"/> turns one into a builder.</summary>
public enum GreenhouseVariant
{
    /// <summary>Inspection tray leaked into training rows, memorisable crate id, two noise features.</summary>
    Default,

    /// <summary>No planted fault: the tray is random everywhere and crates are reused, so nothing should be flagged.</summary>
    Clean,

    /// <summary>The tray leak is in validation rows too: a pipeline bug the validation loss cannot reveal.</summary>
    ValidationLeak,

    /// <summary>Only the memorisable crate id.</summary>
    MemorisedId,

    /// <summary>30% of training labels flipped; no planted feature.</summary>
    NoisyLabels,

    /// <summary>Only the inspection-tray leak in training rows (crates reused).</summary>
    LeakOnly,

    /// <summary>No fault, but cultivar's effect is four times as strong: a genuine feature that decides.</summary>
    StrongFeature,
}

/// <summary>The command-line names of <see cref="GreenhouseVariant"/> values.</summary>
public static class GreenhouseVariants
{
    /// <summary>Every variant with its command-line name, in declaration order.</summary>
    public static IReadOnlyList<(GreenhouseVariant Variant, string Name)> All { get; } =
    [
        (GreenhouseVariant.Default, "default"),
        (GreenhouseVariant.Clean, "clean"),
        (GreenhouseVariant.ValidationLeak, "validation-leak"),
        (GreenhouseVariant.MemorisedId, "memorised-id"),
        (GreenhouseVariant.NoisyLabels, "noisy-labels"),
        (GreenhouseVariant.LeakOnly, "leak"),
        (GreenhouseVariant.StrongFeature, "strong-feature"),
    ];

    /// <summary>The command-line name of a variant, e.g. <c>validation-leak</c>.</summary>
    public static string NameOf(GreenhouseVariant variant)
    {
        foreach (var (v, name) in All)
        {
            if (v == variant)
                return name;
        }
        throw new ArgumentOutOfRangeException(nameof(variant), variant, "not a greenhouse variant");
    }

    /// <summary>Parses a command-line name (case-insensitive); false when it names no variant.</summary>
    public static bool TryParse(string? name, out GreenhouseVariant variant)
    {
        foreach (var (v, n) in All)
        {
            if (string.Equals(n, name, StringComparison.OrdinalIgnoreCase))
            {
                variant = v;
                return true;
            }
        }
        variant = default;
        return false;
    }
}
