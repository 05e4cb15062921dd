namespace DriftWatch.Demo.Greenhouse;

/// <summary>
/// Builds a seeded greenhouse scenario: tomato batches graded pass/fail by a known rule of sensor and logistics
/// features, with faults planted on request.
/// </summary>
/// <remarks>
/// A new builder describes the clean scenario (seed 1, 800 training rows, 1000 validation rows, random tray, reused
/// crates); add faults with the <c>With…</c> methods, or start from a ready-made variant with <see cref="For"/>.
/// Genuine features, noise features and labels depend only on the seed and row counts, so variants built with the
/// same seed share them and differ only in the planted columns.
/// </remarks>
public sealed class ScenarioBuilder
{
    private ScenarioOptions _settings = new();

    /// <summary>A builder for one of the demo's ready-made variants.</summary>
    public static ScenarioBuilder For(GreenhouseVariant variant) => variant switch
    {
        GreenhouseVariant.Default => new ScenarioBuilder().WithLeakedTray().WithMemorisableCrateId(),
        GreenhouseVariant.Clean => new ScenarioBuilder(),
        GreenhouseVariant.ValidationLeak => new ScenarioBuilder().WithLeakedTrayInValidation(),
        GreenhouseVariant.MemorisedId => new ScenarioBuilder().WithMemorisableCrateId(),
        GreenhouseVariant.NoisyLabels => new ScenarioBuilder().WithFlippedLabels(),
        GreenhouseVariant.LeakOnly => new ScenarioBuilder().WithLeakedTray(),
        GreenhouseVariant.StrongFeature => new ScenarioBuilder().WithStrongCultivar(),
        _ => throw new ArgumentOutOfRangeException(nameof(variant), variant, "not a greenhouse variant"),
    };

    /// <summary>The settings so far.</summary>
    public ScenarioOptions Settings => _settings;

    /// <summary>Sets the seed of every random draw.</summary>
    public ScenarioBuilder WithSeed(int seed) => Set(_settings with { Seed = seed });

    /// <summary>Sets the number of training rows (at least 20).</summary>
    public ScenarioBuilder WithTrainingRows(int rows) => Set(_settings with { TrainingRows = rows });

    /// <summary>Sets the number of validation rows (at least 20).</summary>
    public ScenarioBuilder WithValidationRows(int rows) => Set(_settings with { ValidationRows = rows });

    /// <summary>Plants the leak: the inspection tray matches the grade in this fraction of training rows; validation trays stay random.</summary>
    public ScenarioBuilder WithLeakedTray(double agreement = 0.85) =>
        Set(_settings with { TrayLeak = TrayLeak.TrainingOnly, TrayAgreement = agreement });

    /// <summary>Plants the leak in training and validation rows alike, as a pipeline bug would.</summary>
    public ScenarioBuilder WithLeakedTrayInValidation(double agreement = 0.85) =>
        Set(_settings with { TrayLeak = TrayLeak.TrainingAndValidation, TrayAgreement = agreement });

    /// <summary>Makes the crate id near-unique; validation rows draw crate ids from the same range.</summary>
    /// <param name="levels">Number of crate ids; null for 7/8 of the training rows.</param>
    public ScenarioBuilder WithMemorisableCrateId(int? levels = null) =>
        Set(_settings with { MemorisableCrateId = true, CrateIdLevels = levels });

    /// <summary>Flips this fraction of training labels (validation labels stay as graded).</summary>
    public ScenarioBuilder WithFlippedLabels(double fraction = 0.3) => Set(_settings with { FlippedLabelFraction = fraction });

    /// <summary>Makes cultivar a strong genuine feature by multiplying every cultivar's effect; nothing should be flagged as a leak.</summary>
    public ScenarioBuilder WithStrongCultivar(double scale = 4) => Set(_settings with { CultivarScale = scale });

    /// <summary>Validates the settings and generates the scenario.</summary>
    /// <exception cref="ArgumentOutOfRangeException">A setting is out of range.</exception>
    public GreenhouseScenario Build()
    {
        _settings.Validate();
        return GreenhouseGenerator.Generate(_settings);
    }

    private ScenarioBuilder Set(ScenarioOptions settings)
    {
        _settings = settings;
        return this;
    }
}
