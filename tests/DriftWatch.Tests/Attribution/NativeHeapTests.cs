using DriftWatch.Attribution;
using Xunit;

namespace DriftWatch.Tests.Attribution;

public sealed class NativeHeapTests
{
    [Fact]
    public void GlibcTakesTheSettingsAndOtherSystemsAreLeftAlone()
    {
        // glibc's mallopt returns 1 when it takes a setting (glibc manual, "Malloc Tunable Parameters"); the settings
        // only let the allocator keep freed memory, so taking them here does not disturb the other tests.
        bool glibc = OperatingSystem.IsLinux() && !File.Exists("/etc/alpine-release");
        Assert.Equal(glibc, NativeHeap.HoldFreedMemory(1 << 30)); // above glibc's largest mapping threshold: capped, still taken
        Assert.Equal(glibc, NativeHeap.HoldFreedMemory());
    }

    [Fact]
    public void ANegativeBudgetIsABug()
    {
        Assert.Throws<ArgumentOutOfRangeException>(() => NativeHeap.HoldFreedMemory(-1));
    }
}
