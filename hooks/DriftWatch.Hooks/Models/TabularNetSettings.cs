using System.Collections.Immutable;
using System.Globalization;
using System.Text.Json;

namespace DriftWatch.Hooks.Models;

/// <summary>The non-linearity between the hidden layers of a <see cref="TabularNet"/>.</summary>
public enum HiddenActivation
{
    /// <summary>max(0, x).</summary>
    ReLU,

    /// <summary>The Gaussian error linear unit.</summary>
    GELU,

    /// <summary>The hyperbolic tangent.</summary>
    Tanh,

    /// <summary>x · sigmoid(x).</summary>
    SiLU,
}

/// <summary>A categorical input of a <see cref="TabularNet"/>: its name, how many ids it has and how wide its embedding is.</summary>
/// <param name="Name">The feature's name.</param>
/// <param name="Cardinality">Number of ids (0 … Cardinality − 1).</param>
/// <param name="Width">Columns of its embedding, i.e. of its feature-space block.</param>
public sealed record CategoricalEmbedding(string Name, int Cardinality, int Width);

/// <summary>
/// The architecture of a <see cref="TabularNet"/>: dense inputs, categorical embeddings, the MLP head. Everything needed to
/// rebuild the model with fresh weights; stored with a run as the settings of its <see cref="TabularNetFactory"/>.
/// </summary>
public sealed record TabularNetSettings
{
    /// <summary>The dense features' names, in column order; their count is the number of dense inputs. Default none.</summary>
    public ImmutableArray<string> DenseNames { get; init; } = [];

    /// <summary>The categorical features, in column order after the dense ones. Default none.</summary>
    public ImmutableArray<CategoricalEmbedding> Categoricals { get; init; } = [];

    /// <summary>Widths of the hidden layers, input side first; empty for a linear model on feature space. Default 64, 64.</summary>
    public ImmutableArray<int> HiddenWidths { get; init; } = [64, 64];

    /// <summary>The activation after each hidden layer. Default ReLU.</summary>
    public HiddenActivation Activation { get; init; } = HiddenActivation.ReLU;

    /// <summary>Dropout after each hidden layer's activation, in [0, 1); 0 for none. Default 0.</summary>
    public double Dropout { get; init; }

    /// <summary>Outputs of the last layer (1 for a binary logit). Default 1.</summary>
    public int Outputs { get; init; } = 1;

    /// <summary>Checks every setting, naming the first bad one.</summary>
    /// <exception cref="DriftWatchException">No inputs, a duplicate or empty name, a cardinality, width or output count below 1, or dropout outside [0, 1).</exception>
    public void Validate()
    {
        if (DenseNames.IsDefault || Categoricals.IsDefault || HiddenWidths.IsDefault)
            throw new DriftWatchException("tabular model settings: DenseNames, Categoricals and HiddenWidths must be set (empty arrays are allowed)");
        if (DenseNames.Length + Categoricals.Length == 0)
            throw new DriftWatchException("tabular model settings: no inputs; give at least one dense name or one categorical");
        var names = DenseNames.Concat(Categoricals.Select(c => c?.Name ?? "")).ToList();
        if (names.FirstOrDefault(string.IsNullOrWhiteSpace) is not null)
            throw new DriftWatchException("tabular model settings: a feature name is empty; name every input");
        var duplicate = names.GroupBy(n => n, StringComparer.Ordinal).FirstOrDefault(g => g.Count() > 1);
        if (duplicate is not null)
            throw new DriftWatchException($"tabular model settings: feature '{duplicate.Key}' is named twice; names must be unique");
        foreach (var c in Categoricals)
        {
            if (c.Cardinality < 1)
                throw new DriftWatchException($"tabular model settings: categorical '{c.Name}' has cardinality {c.Cardinality}; it must be at least 1");
            if (c.Width < 1)
                throw new DriftWatchException($"tabular model settings: categorical '{c.Name}' has embedding width {c.Width}; it must be at least 1");
        }
        if (HiddenWidths.Any(w => w < 1))
            throw new DriftWatchException($"tabular model settings: hidden width {HiddenWidths.First(w => w < 1)} must be at least 1");
        if (!Enum.IsDefined(Activation))
            throw new DriftWatchException($"tabular model settings: activation {(int)Activation} is unknown; use one of {string.Join(", ", Enum.GetNames<HiddenActivation>())}");
        if (!(Dropout >= 0 && Dropout < 1))
            throw new DriftWatchException($"tabular model settings: dropout must be at least 0 and below 1; got {Dropout.ToString(CultureInfo.InvariantCulture)}");
        if (Outputs < 1)
            throw new DriftWatchException($"tabular model settings: outputs must be at least 1; got {Outputs}");
    }

    /// <summary>The settings as stored with a run (invariant culture): <c>dense</c>, <c>categorical</c> (JSON), <c>hidden</c>, <c>activation</c>, <c>dropout</c>, <c>outputs</c>.</summary>
    public ImmutableSortedDictionary<string, string> ToStored() => ImmutableSortedDictionary.CreateRange(StringComparer.Ordinal, new Dictionary<string, string>
    {
        ["dense"] = JsonSerializer.Serialize(DenseNames.ToArray()),
        ["categorical"] = JsonSerializer.Serialize(Categoricals.Select(c => new object[] { c.Name, c.Cardinality, c.Width }).ToArray()),
        ["hidden"] = string.Join(",", HiddenWidths.Select(w => w.ToString(CultureInfo.InvariantCulture))),
        ["activation"] = Activation.ToString(),
        ["dropout"] = Dropout.ToString("R", CultureInfo.InvariantCulture),
        ["outputs"] = Outputs.ToString(CultureInfo.InvariantCulture),
    });

    /// <summary>Reads settings stored by <see cref="ToStored"/>.</summary>
    /// <exception cref="DriftWatchException">A key is missing or a value malformed; the message names it.</exception>
    public static TabularNetSettings FromStored(IReadOnlyDictionary<string, string> stored)
    {
        ArgumentNullException.ThrowIfNull(stored);
        string Get(string key) => stored.TryGetValue(key, out var value)
            ? value
            : throw new DriftWatchException($"tabular model settings lack '{key}'; the run did not record a complete recipe");
        string current = "dense";
        try
        {
            var dense = JsonSerializer.Deserialize<string[]>(Get("dense")) ?? [];
            current = "categorical";
            var categoricals = (JsonSerializer.Deserialize<JsonElement[][]>(Get("categorical")) ?? [])
                .Select(triple => triple.Length == 3
                    ? new CategoricalEmbedding(triple[0].GetString() ?? "", triple[1].GetInt32(), triple[2].GetInt32())
                    : throw new FormatException("expected [name, cardinality, width] triples"))
                .ToArray();
            current = "hidden";
            string hidden = Get("hidden");
            int[] widths = hidden.Length == 0 ? [] : hidden.Split(',').Select(w => int.Parse(w, NumberStyles.Integer, CultureInfo.InvariantCulture)).ToArray();
            current = "activation";
            var activation = Enum.TryParse<HiddenActivation>(Get("activation"), ignoreCase: false, out var a) && Enum.IsDefined(a) && !int.TryParse(Get("activation"), out _)
                ? a
                : throw new FormatException($"expected one of {string.Join(", ", Enum.GetNames<HiddenActivation>())}");
            current = "dropout";
            double dropout = double.Parse(Get("dropout"), NumberStyles.Float, CultureInfo.InvariantCulture);
            current = "outputs";
            int outputs = int.Parse(Get("outputs"), NumberStyles.Integer, CultureInfo.InvariantCulture);
            var settings = new TabularNetSettings
            {
                DenseNames = [.. dense],
                Categoricals = [.. categoricals],
                HiddenWidths = [.. widths],
                Activation = activation,
                Dropout = dropout,
                Outputs = outputs,
            };
            settings.Validate();
            return settings;
        }
        catch (Exception e) when (e is JsonException or FormatException or OverflowException or InvalidOperationException)
        {
            throw new DriftWatchException($"tabular model setting '{current}' is malformed: {e.Message}", e);
        }
    }
}
