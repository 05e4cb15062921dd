using System.Globalization;
using System.Text.Json;
using DriftWatch.Model;

namespace DriftWatch.Demo.Greenhouse;

/// <summary>Rebuilds a <see cref="GreenhouseNet"/> from the settings a run recorded, so <c>driftwatch reattribute</c> can load its snapshots.</summary>
/// <remarks>Settings: <c>dense</c> (JSON array of names), <c>categorical</c> (JSON array of [name, levels] pairs), <c>embedding-width</c>, <c>hidden</c>, <c>dropout</c>.</remarks>
public sealed class GreenhouseNetFactory : IModelFactory
{
    /// <summary>The recipe that rebuilds <paramref name="model"/>'s architecture (its categorical levels as given).</summary>
    public static ModelRecipe RecipeFor(GreenhouseNet model, IReadOnlyList<CategoricalInput> categoricals)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(categoricals);
        var dense = model.Schema.Features.Where(f => f.Kind == FeatureKind.Dense).Select(f => f.Name).ToArray();
        return ModelRecipe.For<GreenhouseNetFactory>(new Dictionary<string, string>
        {
            ["dense"] = JsonSerializer.Serialize(dense),
            ["categorical"] = JsonSerializer.Serialize(categoricals.Select(c => new object[] { c.Name, c.Levels }).ToArray()),
            ["embedding-width"] = model.EmbeddingWidth.ToString(CultureInfo.InvariantCulture),
            ["hidden"] = model.Hidden.ToString(CultureInfo.InvariantCulture),
            ["dropout"] = model.Dropout.ToString("R", CultureInfo.InvariantCulture),
        });
    }

    /// <summary>The recipe of <see cref="GreenhouseNet.For"/> for a scenario.</summary>
    public static ModelRecipe RecipeFor(GreenhouseNet model, GreenhouseScenario scenario)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        return RecipeFor(model, [.. scenario.CategoricalFeatures.Select(f => new CategoricalInput(f.Name, f.Levels))]);
    }

    /// <inheritdoc />
    public IWatchedModel Create(IReadOnlyDictionary<string, string> settings)
    {
        ArgumentNullException.ThrowIfNull(settings);
        try
        {
            var dense = JsonSerializer.Deserialize<string[]>(Get(settings, "dense")) ?? [];
            var categorical = (JsonSerializer.Deserialize<JsonElement[][]>(Get(settings, "categorical")) ?? [])
                .Select(pair => pair.Length == 2
                    ? new CategoricalInput(pair[0].GetString() ?? "", pair[1].GetInt32())
                    : throw new DriftWatchException("greenhouse model setting 'categorical' must hold [name, levels] pairs"))
                .ToArray();
            int width = int.Parse(Get(settings, "embedding-width"), CultureInfo.InvariantCulture);
            int hidden = int.Parse(Get(settings, "hidden"), CultureInfo.InvariantCulture);
            double dropout = double.Parse(Get(settings, "dropout"), CultureInfo.InvariantCulture);
            return new GreenhouseNet(dense, categorical, width, hidden, dropout);
        }
        catch (Exception e) when (e is JsonException or FormatException or OverflowException or InvalidOperationException or ArgumentException)
        {
            throw new DriftWatchException($"greenhouse model settings are malformed: {e.Message}", e);
        }
    }

    private static string Get(IReadOnlyDictionary<string, string> settings, string key) =>
        settings.TryGetValue(key, out var value)
            ? value
            : throw new DriftWatchException($"greenhouse model settings lack '{key}'; the run did not record a complete recipe");
}
