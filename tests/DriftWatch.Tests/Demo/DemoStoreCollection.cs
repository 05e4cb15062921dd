using Xunit;

namespace DriftWatch.Tests.Demo;

/// <summary>Test classes in this collection share one <see cref="DemoStoreFixture"/>, so the demo is trained once for all of them.</summary>
[CollectionDefinition(Name)]
public sealed class DemoStoreCollection : ICollectionFixture<DemoStoreFixture>
{
    /// <summary>The collection's name.</summary>
    public const string Name = "demo store";
}
