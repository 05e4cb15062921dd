using DriftWatch.Build;
using Xunit;

namespace DriftWatch.Tests.Build;

// These run where CI runs (Linux x64); the build step does nothing elsewhere.
public sealed class ElfWeakVersionTests
{
    private static string CacheCopy
    {
        get
        {
            string cache = Environment.GetEnvironmentVariable("NUGET_PACKAGES")
                ?? Path.Combine(Environment.GetFolderPath(Environment.SpecialFolder.UserProfile), ".nuget", "packages");
            string original = Path.Combine(cache, "torchsharp", "0.107.0", "runtimes", "linux-x64", "native", "libLibTorchSharp.so");
            Assert.True(File.Exists(original), "no NuGet cache copy at " + original);
            return original;
        }
    }

    private static string CopiedLibrary => Path.Combine(AppContext.BaseDirectory, "libLibTorchSharp.so");

    [Fact]
    public void TheCopiedLibraryNeedsGlibcxx3432OnlyWeakly()
    {
        var needs = ElfWeakVersion.ReadNeeds(File.ReadAllBytes(CopiedLibrary));

        var marker = Assert.Single(needs, n => n.Version == "GLIBCXX_3.4.32");
        Assert.True(marker.IsWeak);
        Assert.Equal("libstdc++.so.6", marker.File);
        Assert.All(needs.Where(n => n.Version != "GLIBCXX_3.4.32"), n => Assert.False(n.IsWeak));
    }

    [Fact]
    public void ThePackageCacheCopyIsLeftUntouched()
    {
        string original = CacheCopy;

        var needs = ElfWeakVersion.ReadNeeds(File.ReadAllBytes(original));

        Assert.False(Assert.Single(needs, n => n.Version == "GLIBCXX_3.4.32").IsWeak);
    }

    [Fact]
    public void MarkingIsIdempotentAndTouchesOnlyTheFlagBytes()
    {
        string original = CacheCopy;
        byte[] before = File.ReadAllBytes(original);
        byte[] bytes = (byte[])before.Clone();

        Assert.Equal(1, ElfWeakVersion.MarkWeak(bytes, ["GLIBCXX_3.4.32"]));
        Assert.Equal(0, ElfWeakVersion.MarkWeak(bytes, ["GLIBCXX_3.4.32"]));

        var changed = Enumerable.Range(0, bytes.Length).Where(i => bytes[i] != before[i]).ToList();
        var flag = ElfWeakVersion.ReadNeeds(bytes).Single(n => n.Version == "GLIBCXX_3.4.32");
        Assert.Equal([flag.FlagsOffset], changed.Select(i => (long)i));
    }

    [Fact]
    public void AFileThatIsNotElfIsRefused()
    {
        Assert.Throws<InvalidDataException>(() => ElfWeakVersion.ReadNeeds(new byte[128]));
    }
}
