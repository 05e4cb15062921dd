using System.Reflection;
using DriftWatch.Storage;
using LiteDB;
using Xunit;

namespace DriftWatch.Tests.Storage;

public sealed class StoreMapperTests
{
    private static readonly Assembly Core = typeof(RunStore).Assembly;

    [Fact]
    public void EveryCollectionsDocumentTypeIsMappedUpFront()
    {
        // The store's collections, found from its ILiteCollection<T> properties rather than from the mapper's own list.
        var collections = typeof(RunStore).GetProperties(BindingFlags.NonPublic | BindingFlags.Instance)
            .Where(p => p.PropertyType.IsGenericType && p.PropertyType.GetGenericTypeDefinition() == typeof(ILiteCollection<>))
            .Select(p => p.PropertyType.GetGenericArguments()[0])
            .ToList();

        Assert.Contains(typeof(MapQualityDocument), collections);
        Assert.Equal(8, collections.Count);
        Assert.Empty(collections.Where(t => !RunStore.MappedTypes.Contains(t)).Select(t => t.Name));
    }

    [Fact]
    public void EveryStoredTypeNestedInADocumentIsMappedUpFront()
    {
        // Every sealed type of the storage namespace (the documents), and every Core class reached through their properties.
        var documents = Core.GetTypes()
            .Where(t => t.Namespace == "DriftWatch.Storage" && t.IsClass && t.IsSealed && t.Name.EndsWith("Document", StringComparison.Ordinal))
            .ToList();
        var stored = new HashSet<Type>();
        var pending = new Stack<Type>(documents);
        while (pending.TryPop(out var type))
        {
            if (!stored.Add(type))
                continue;
            foreach (var property in type.GetProperties(BindingFlags.Public | BindingFlags.Instance))
            {
                foreach (var nested in CoreClassesIn(property.PropertyType))
                    pending.Push(nested);
            }
        }

        Assert.Contains(typeof(AgreementDocument), stored);
        Assert.Contains(typeof(DriftWatch.Detection.EpochStatistics), stored);
        var missing = stored.Where(t => !RunStore.MappedTypes.Contains(t)).Select(t => t.FullName).Order(StringComparer.Ordinal).ToList();
        Assert.Empty(missing);
    }

    private static IEnumerable<Type> CoreClassesIn(Type type)
    {
        type = Nullable.GetUnderlyingType(type) ?? type;
        if (type.IsArray)
            return CoreClassesIn(type.GetElementType()!);
        if (type.IsGenericType)
            return type.GetGenericArguments().SelectMany(CoreClassesIn);
        return type.IsClass && type.Assembly == Core ? [type] : [];
    }
}
