using System.Collections;
using System.Collections.Frozen;
using System.Collections.Immutable;
using System.Collections.ObjectModel;
using System.Reflection;
using DriftWatch.Storage;
using Xunit;

namespace DriftWatch.Tests.Conventions;

public sealed class FrozenPublicTypesTests
{
    private const string TensorBoundary = "a numeric buffer at the tensor boundary: handed to torch.tensor or the bootstrap's inner loops as the array it is, not copied every epoch";
    private const string AttributionBuffers = "rows × columns buffers every attribution method fills in place; freezing them is a churn of its own";

    // Public properties of a mutable collection type that exist today, each with why it is still here. The list only
    // shrinks: a property that is no longer an offender must leave it (AllowedOffendersStillExist).
    private static readonly Dictionary<string, string> Allowed = new(StringComparer.Ordinal)
    {
        ["DriftWatch.Attribution.Baseline.Values"] = TensorBoundary,
        ["DriftWatch.Detection.RunContext.Labels"] = TensorBoundary,
        ["DriftWatch.Probing.ProbeRows.Categorical"] = TensorBoundary,
        ["DriftWatch.Probing.ProbeRows.Dense"] = TensorBoundary,
        ["DriftWatch.Probing.ProbeRows.Labels"] = TensorBoundary,
        ["DriftWatch.Attribution.AttributionMap.Deltas"] = AttributionBuffers,
        ["DriftWatch.Attribution.AttributionMap.OutputGaps"] = AttributionBuffers,
        ["DriftWatch.Attribution.AttributionMap.Scores"] = AttributionBuffers,
        ["DriftWatch.Attribution.ColumnAttribution.OutputGaps"] = AttributionBuffers,
        ["DriftWatch.Attribution.ColumnAttribution.Scores"] = AttributionBuffers,
    };

    [Fact]
    public void NoPublicPropertyOutsideTheStoredDocumentsIsAMutableCollection()
    {
        var offenders = FrozenConventions.Offenders().Where(o => !Allowed.ContainsKey(o.Name)).Select(o => o.ToString()).ToList();
        Assert.Empty(offenders);
    }

    [Fact]
    public void AllowedOffendersStillExist()
    {
        var offenders = FrozenConventions.Offenders().Select(o => o.Name).ToHashSet(StringComparer.Ordinal);
        var stale = Allowed.Keys.Where(k => !offenders.Contains(k)).ToList();
        Assert.Empty(stale);
    }

    [Theory]
    [InlineData(typeof(int[]), true)]
    [InlineData(typeof(List<string>), true)]
    [InlineData(typeof(Dictionary<string, double>), true)]
    [InlineData(typeof(HashSet<int>), true)]
    [InlineData(typeof(IList<int>), true)]
    [InlineData(typeof(IDictionary<string, int>), true)]
    [InlineData(typeof(Queue<int>), true)]
    [InlineData(typeof(IReadOnlyList<float[]>), true)]
    [InlineData(typeof(ImmutableArray<double>), false)]
    [InlineData(typeof(ImmutableDictionary<string, double>), false)]
    [InlineData(typeof(IReadOnlyList<string>), false)]
    [InlineData(typeof(IReadOnlyDictionary<string, IReadOnlyDictionary<long, int>>), false)]
    [InlineData(typeof(FrozenSet<string>), false)]
    [InlineData(typeof(string), false)]
    [InlineData(typeof(IEnumerable<int>), false)]
    public void MutableCollectionTypesAreTold(Type type, bool mutable) => Assert.Equal(mutable, FrozenConventions.IsMutable(type));
}

internal static class FrozenConventions
{
    /// <summary>A public property of a mutable collection type: its type's full name and property name, and the type it has.</summary>
    public sealed record Offender(string Name, Type PropertyType)
    {
        public override string ToString() => $"{Name}: {PropertyType}";
    }

    public static IEnumerable<Offender> Offenders() =>
        DriftWatchAssemblies.All.SelectMany(a => a.GetExportedTypes())
            .Where(t => !(t.Namespace == typeof(RunStore).Namespace && t.Name.EndsWith("Document", StringComparison.Ordinal)))
            .SelectMany(t => t.GetProperties(BindingFlags.Public | BindingFlags.Instance | BindingFlags.Static | BindingFlags.DeclaredOnly).Select(p => (Type: t, Property: p)))
            .Where(x => IsMutable(x.Property.PropertyType))
            .Select(x => new Offender($"{x.Type.FullName}.{x.Property.Name}", x.Property.PropertyType))
            .OrderBy(o => o.Name, StringComparer.Ordinal);

    public static bool IsMutable(Type type)
    {
        if (type.IsArray)
            return true;
        if (type.IsGenericType && type.GetGenericArguments().Any(IsMutable))
            return true;
        if (type.Namespace is "System.Collections.Immutable" or "System.Collections.Frozen")
            return false;
        var definition = type.IsGenericType ? type.GetGenericTypeDefinition() : type;
        if (definition == typeof(ReadOnlyCollection<>) || definition == typeof(ReadOnlyDictionary<,>) || definition == typeof(ReadOnlySet<>))
            return false;
        if (definition == typeof(Queue<>) || definition == typeof(Stack<>))
            return true;
        if (type.IsInterface && type.IsGenericType
            && (definition == typeof(ICollection<>) || definition == typeof(IList<>) || definition == typeof(IDictionary<,>) || definition == typeof(ISet<>)))
            return true;
        if (type == typeof(IList) || type == typeof(IDictionary))
            return true;
        if (type == typeof(string))
            return false;
        return type.GetInterfaces().Any(i => i == typeof(IList) || i == typeof(IDictionary) || (i.IsGenericType && i.GetGenericTypeDefinition() == typeof(ICollection<>)));
    }
}
