using System.Collections.Immutable;

namespace DriftWatch.Attribution;

/// <summary>An attribution method: takes a probe batch in feature space and a target, returns per-column scores.</summary>
/// <remarks>Add a method by adding a class that implements this interface; nothing else needs to change.</remarks>
public interface IAttributionMethod
{
    /// <summary>A short stable name stored with every map, e.g. <c>integrated-gradients</c>.</summary>
    string Name { get; }

    /// <summary>The settings that shaped the result, stored with every map (invariant culture).</summary>
    ImmutableSortedDictionary<string, string> Settings { get; }

    /// <summary>Attributes the target scalar of every row to every feature-space column.</summary>
    ColumnAttribution Attribute(AttributionInput input);
}
