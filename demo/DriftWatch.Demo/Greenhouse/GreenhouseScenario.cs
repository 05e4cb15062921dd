using System.Collections.Immutable;
using System.Globalization;
using System.Text;

namespace DriftWatch.Demo.Greenhouse;

/// <summary>A generated greenhouse scenario: training and validation rows, the training statistics and the ground truth.</summary>
public sealed class GreenhouseScenario
{
    internal GreenhouseScenario(
        ScenarioOptions settings,
        GreenhouseSplit training,
        GreenhouseSplit validation,
        ImmutableArray<FeatureTruth> features,
        ImmutableArray<double> denseMeans,
        ImmutableArray<double> denseDeviations)
    {
        Settings = settings;
        Training = training;
        Validation = validation;
        Features = features;
        DenseMeans = denseMeans;
        DenseStandardDeviations = denseDeviations;
        TrainingValueCounts = CountValues(training, CategoricalFeatures);
    }

    /// <summary>The settings it was generated from.</summary>
    public ScenarioOptions Settings { get; }

    /// <summary>The training rows.</summary>
    public GreenhouseSplit Training { get; }

    /// <summary>The validation (held-out) rows.</summary>
    public GreenhouseSplit Validation { get; }

    /// <summary>Every feature's ground truth, dense features first, in the model's column order.</summary>
    public ImmutableArray<FeatureTruth> Features { get; }

    /// <summary>The dense features in column order.</summary>
    public ImmutableArray<FeatureTruth> DenseFeatures => [.. Features.Where(f => f.Kind == Model.FeatureKind.Dense)];

    /// <summary>The categorical features in column order.</summary>
    public ImmutableArray<FeatureTruth> CategoricalFeatures => [.. Features.Where(f => f.Kind == Model.FeatureKind.Categorical)];

    /// <summary>Training-set mean of each dense feature in raw units, used to standardise both sets.</summary>
    public ImmutableArray<double> DenseMeans { get; }

    /// <summary>Training-set standard deviation of each dense feature in raw units, used to standardise both sets.</summary>
    public ImmutableArray<double> DenseStandardDeviations { get; }

    /// <summary>Per categorical feature, how many training rows have each id (for <c>MonitorOptions.TrainingValueCounts</c>).</summary>
    public ImmutableDictionary<string, ImmutableDictionary<long, int>> TrainingValueCounts { get; }

    /// <summary>The names of the features a detector should flag (leaked or memorisable); empty for a clean scenario.</summary>
    public ImmutableArray<string> PlantedFaults => [.. Features.Where(f => f.ShouldBeFlagged).Select(f => f.Name)];

    /// <summary>The ground truth of the named feature.</summary>
    /// <exception cref="ArgumentException">No feature has that name.</exception>
    public FeatureTruth Feature(string name)
    {
        foreach (var feature in Features)
        {
            if (feature.Name == name)
                return feature;
        }
        throw new ArgumentException($"no feature named '{name}'; features: {string.Join(", ", Features.Select(f => f.Name))}", nameof(name));
    }

    /// <summary>One line naming the planted faults and sizes, fit for a run's description.</summary>
    public string Describe()
    {
        var s = Settings;
        var text = new StringBuilder();
        text.Append(CultureInfo.InvariantCulture, $"greenhouse scenario, seed {s.Seed}, {s.TrainingRows} training and {s.ValidationRows} validation rows; ");
        text.Append(s.TrayLeak switch
        {
            TrayLeak.TrainingOnly => string.Create(CultureInfo.InvariantCulture, $"inspection tray matches the grade in {s.TrayAgreement:P0} of training rows only"),
            TrayLeak.TrainingAndValidation => string.Create(CultureInfo.InvariantCulture, $"inspection tray matches the grade in {s.TrayAgreement:P0} of training and validation rows"),
            _ => "inspection tray random",
        });
        text.Append(s.MemorisableCrateId
            ? string.Create(CultureInfo.InvariantCulture, $"; crate id near-unique ({s.EffectiveCrateLevels} ids)")
            : string.Create(CultureInfo.InvariantCulture, $"; crates reused ({s.EffectiveCrateLevels} ids)"));
        if (s.FlippedLabelFraction > 0)
            text.Append(CultureInfo.InvariantCulture, $"; {s.FlippedLabelFraction:P0} of training labels flipped");
        text.Append("; sensor drift a and b are noise");
        return text.ToString();
    }

    private static ImmutableDictionary<string, ImmutableDictionary<long, int>> CountValues(GreenhouseSplit split, ImmutableArray<FeatureTruth> categoricals)
    {
        var counts = ImmutableDictionary.CreateBuilder<string, ImmutableDictionary<long, int>>(StringComparer.Ordinal);
        for (int c = 0; c < categoricals.Length; c++)
        {
            counts[categoricals[c].Name] = split.CategoricalColumn(c)
                .GroupBy(id => id)
                .ToImmutableDictionary(g => g.Key, g => g.Count());
        }
        return counts.ToImmutable();
    }
}
