using System.Collections.Immutable;

namespace DriftWatch.Model;

/// <summary>Whether a feature is a dense value or a categorical id looked up in an embedding.</summary>
public enum FeatureKind
{
    /// <summary>One float column.</summary>
    Dense,

    /// <summary>An id whose embedding vector owns several feature-space columns.</summary>
    Categorical,
}

/// <summary>One named feature and the feature-space columns it owns.</summary>
/// <param name="Name">The feature's name as users know it.</param>
/// <param name="Kind">Dense or categorical.</param>
/// <param name="FirstColumn">The first feature-space column the feature owns.</param>
/// <param name="ColumnCount">How many consecutive columns it owns (1 for dense, the embedding width for categorical).</param>
public sealed record FeatureDefinition(string Name, FeatureKind Kind, int FirstColumn, int ColumnCount);

/// <summary>Names each feature and the feature-space columns it owns; a categorical's importance is the sum over its columns.</summary>
public sealed class FeatureSchema
{
    private FeatureSchema(ImmutableArray<FeatureDefinition> features, int denseCount, int categoricalCount)
    {
        Features = features;
        DenseCount = denseCount;
        CategoricalCount = categoricalCount;
        ColumnCount = features.Length == 0 ? 0 : features[^1].FirstColumn + features[^1].ColumnCount;
    }

    /// <summary>The features in feature-space order.</summary>
    public ImmutableArray<FeatureDefinition> Features { get; }

    /// <summary>Number of dense inputs in a raw batch.</summary>
    public int DenseCount { get; }

    /// <summary>Number of categorical inputs in a raw batch.</summary>
    public int CategoricalCount { get; }

    /// <summary>Total feature-space width.</summary>
    public int ColumnCount { get; }

    /// <summary>Number of features.</summary>
    public int Count => Features.Length;

    /// <summary>The feature names in order.</summary>
    public ImmutableArray<string> Names => Features.Select(f => f.Name).ToImmutableArray();

    /// <summary>Starts a schema: add features in the order the model's encode step lays out their columns.</summary>
    public static Builder CreateBuilder() => new();

    /// <summary>Rebuilds a schema from stored definitions, validating them.</summary>
    public static FeatureSchema FromDefinitions(IEnumerable<FeatureDefinition> definitions)
    {
        ArgumentNullException.ThrowIfNull(definitions);
        var builder = new Builder();
        foreach (var d in definitions)
        {
            if (d.Kind == FeatureKind.Dense)
                builder.AddDense(d.Name);
            else
                builder.AddCategorical(d.Name, d.ColumnCount);
        }
        return builder.Build();
    }

    /// <summary>Maps each feature-space column to the index of the feature that owns it.</summary>
    public int[] ColumnOwners()
    {
        var owners = new int[ColumnCount];
        for (int f = 0; f < Features.Length; f++)
        {
            for (int c = 0; c < Features[f].ColumnCount; c++)
                owners[Features[f].FirstColumn + c] = f;
        }
        return owners;
    }

    /// <summary>Builds a <see cref="FeatureSchema"/>; dense and categorical features may be interleaved.</summary>
    public sealed class Builder
    {
        private readonly List<FeatureDefinition> _features = [];
        private readonly HashSet<string> _names = new(StringComparer.Ordinal);
        private int _column;
        private int _dense;
        private int _categorical;

        /// <summary>Adds a dense feature owning one column.</summary>
        public Builder AddDense(string name)
        {
            Add(name, FeatureKind.Dense, 1);
            _dense++;
            return this;
        }

        /// <summary>Adds a categorical feature owning <paramref name="embeddingWidth"/> columns.</summary>
        public Builder AddCategorical(string name, int embeddingWidth)
        {
            if (embeddingWidth < 1)
                throw new DriftWatchException($"feature '{name}': embedding width must be at least 1; got {embeddingWidth}");
            Add(name, FeatureKind.Categorical, embeddingWidth);
            _categorical++;
            return this;
        }

        /// <summary>Freezes the schema.</summary>
        public FeatureSchema Build()
        {
            if (_features.Count == 0)
                throw new DriftWatchException("feature schema is empty; add at least one dense or categorical feature");
            return new FeatureSchema([.. _features], _dense, _categorical);
        }

        private void Add(string name, FeatureKind kind, int width)
        {
            if (string.IsNullOrWhiteSpace(name))
                throw new DriftWatchException($"feature #{_features.Count} has an empty name; give every feature a name");
            if (!_names.Add(name))
                throw new DriftWatchException($"feature name '{name}' is used twice; feature names must be unique");
            _features.Add(new FeatureDefinition(name, kind, _column, width));
            _column += width;
        }
    }
}
