using System.Collections.Immutable;
using System.Reflection;

namespace DriftWatch.Model;

/// <summary>Builds a watched model with fresh weights from the settings a run recorded, so its snapshots can be loaded the morning after.</summary>
/// <remarks>Implementations need a public parameterless constructor; the run stores the type's name and the settings.</remarks>
public interface IModelFactory
{
    /// <summary>Builds the model the settings describe; its parameters must have the names and shapes of the trained one.</summary>
    /// <exception cref="DriftWatchException">Missing or malformed settings.</exception>
    IWatchedModel Create(IReadOnlyDictionary<string, string> settings);
}

/// <summary>How to rebuild a run's model: the factory type and the settings it is given.</summary>
/// <param name="Factory">A type implementing <see cref="IModelFactory"/> with a public parameterless constructor.</param>
/// <param name="Settings">The settings, invariant culture.</param>
public sealed record ModelRecipe(Type Factory, ImmutableSortedDictionary<string, string> Settings)
{
    /// <summary>A recipe using factory <typeparamref name="TFactory"/>.</summary>
    public static ModelRecipe For<TFactory>(IEnumerable<KeyValuePair<string, string>> settings)
        where TFactory : IModelFactory, new()
    {
        ArgumentNullException.ThrowIfNull(settings);
        return new ModelRecipe(typeof(TFactory), ImmutableSortedDictionary.CreateRange(StringComparer.Ordinal, settings));
    }

    /// <summary>The name stored with the run: the type's full name and its assembly's simple name, e.g. <c>Ns.MyFactory, MyModels</c>.</summary>
    public string FactoryName => StoredName(Factory);

    /// <summary>The stored name of a factory type.</summary>
    public static string StoredName(Type factory)
    {
        ArgumentNullException.ThrowIfNull(factory);
        return $"{factory.FullName}, {factory.Assembly.GetName().Name}";
    }

    /// <summary>Builds the model.</summary>
    /// <exception cref="DriftWatchException">The type is not a usable factory, or it refused the settings.</exception>
    public IWatchedModel Build() => Build(Factory, Settings);

    /// <summary>Builds a model with factory type <paramref name="factory"/> from <paramref name="settings"/>.</summary>
    /// <exception cref="DriftWatchException">The type is not a usable factory, or it refused the settings.</exception>
    public static IWatchedModel Build(Type factory, IReadOnlyDictionary<string, string> settings)
    {
        ArgumentNullException.ThrowIfNull(factory);
        ArgumentNullException.ThrowIfNull(settings);
        if (!typeof(IModelFactory).IsAssignableFrom(factory) || factory.IsAbstract || factory.GetConstructor(Type.EmptyTypes) is null)
            throw new DriftWatchException($"model factory '{factory.FullName}' must be a class implementing IModelFactory with a public parameterless constructor");
        IModelFactory instance;
        try
        {
            instance = (IModelFactory)Activator.CreateInstance(factory)!;
        }
        catch (TargetInvocationException e)
        {
            throw new DriftWatchException($"model factory '{factory.FullName}' failed to start: {e.InnerException?.Message ?? e.Message}", e);
        }
        return instance.Create(settings) ?? throw new DriftWatchException($"model factory '{factory.FullName}' returned no model");
    }
}

/// <summary>A watched model that knows how it is rebuilt: a run watching it records its recipe without being told.</summary>
/// <remarks>The hook library's ready model families implement it; <c>MonitorOptions.Model</c>, when set, takes precedence.</remarks>
public interface IRebuildableModel : IWatchedModel
{
    /// <summary>The factory and settings that build a model of this architecture with fresh weights.</summary>
    ModelRecipe Recipe { get; }
}
