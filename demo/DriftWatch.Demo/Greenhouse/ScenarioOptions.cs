namespace DriftWatch.Demo.Greenhouse;

/// <summary>Where the inspection-tray leak is planted.</summary>
public enum TrayLeak
{
    /// <summary>No leak: the tray is drawn at random in every row.</summary>
    None,

    /// <summary>The tray matches the grade in training rows only; validation rows get a random tray.</summary>
    TrainingOnly,

    /// <summary>The tray matches the grade in training and validation rows alike.</summary>
    TrainingAndValidation,
}

/// <summary>The frozen settings a <see cref="ScenarioBuilder"/> generates from.</summary>
public sealed record ScenarioOptions
{
    /// <summary>Seed of every random draw. Default 1.</summary>
    public int Seed { get; init; } = 1;

    /// <summary>Rows in the training set. Default 800, small enough that the model overfits within about ten epochs.</summary>
    public int TrainingRows { get; init; } = 800;

    /// <summary>Rows in the validation (held-out) set. Default 1000.</summary>
    public int ValidationRows { get; init; } = 1000;

    /// <summary>Where the inspection-tray leak is planted. Default <see cref="TrayLeak.None"/>.</summary>
    public TrayLeak TrayLeak { get; init; } = TrayLeak.None;

    /// <summary>Fraction of leaked rows whose tray matches the grade (trays 0–4 for fail, 5–9 for pass). Default 0.85.</summary>
    public double TrayAgreement { get; init; } = 0.85;

    /// <summary>Whether the crate id is near-unique (memorisable). Default false: crates are reused across many batches.</summary>
    public bool MemorisableCrateId { get; init; }

    /// <summary>Crate id levels when memorisable; null for the default of 7/8 of the training rows (700 for 800 rows).</summary>
    public int? CrateIdLevels { get; init; }

    /// <summary>Crate id levels when crates are reused (not memorisable). Default 20, about 40 training rows per crate.</summary>
    public int ReusedCrateLevels { get; init; } = 20;

    /// <summary>Fraction of training labels flipped after grading. Default 0.</summary>
    public double FlippedLabelFraction { get; init; }

    /// <summary>The crate id levels in effect: the near-unique count when memorisable, the reused count otherwise.</summary>
    public int EffectiveCrateLevels =>
        MemorisableCrateId ? CrateIdLevels ?? Math.Max(2, (int)Math.Round(TrainingRows * 7.0 / 8.0)) : ReusedCrateLevels;

    /// <summary>Checks every setting.</summary>
    /// <exception cref="ArgumentOutOfRangeException">A setting is out of range.</exception>
    /// <summary>Multiplies every cultivar's effect on the grade; above 1 makes cultivar a strong genuine feature. Default 1.</summary>
    public double CultivarScale { get; init; } = 1;

    /// <summary>Checks every setting.</summary>
    public void Validate()
    {
        if (!(CultivarScale > 0 && CultivarScale <= 20))
            throw new ArgumentOutOfRangeException(nameof(CultivarScale), CultivarScale, "must be above 0 and at most 20");
        ArgumentOutOfRangeException.ThrowIfLessThan(TrainingRows, 20, nameof(TrainingRows));
        ArgumentOutOfRangeException.ThrowIfLessThan(ValidationRows, 20, nameof(ValidationRows));
        if (!(TrayAgreement >= 0.5 && TrayAgreement <= 1))
            throw new ArgumentOutOfRangeException(nameof(TrayAgreement), TrayAgreement, "must be between 0.5 and 1");
        if (CrateIdLevels is int levels)
            ArgumentOutOfRangeException.ThrowIfLessThan(levels, 2, nameof(CrateIdLevels));
        ArgumentOutOfRangeException.ThrowIfLessThan(ReusedCrateLevels, 1, nameof(ReusedCrateLevels));
        if (!(FlippedLabelFraction >= 0 && FlippedLabelFraction < 0.5))
            throw new ArgumentOutOfRangeException(nameof(FlippedLabelFraction), FlippedLabelFraction, "must be at least 0 and below 0.5");
    }
}
