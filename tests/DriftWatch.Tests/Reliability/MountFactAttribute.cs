using System.Globalization;
using Xunit;

namespace DriftWatch.Tests.Reliability;

/// <summary>A test that needs to mount a scratch tmpfs; skipped, with the reason shown, where the process may not mount.</summary>
public sealed class MountFactAttribute : FactAttribute
{
    /// <summary>The environment variable that opts in to the disk-fault tests.</summary>
    public const string OptIn = "DRIFTWATCH_DISK_FAULTS";

    public MountFactAttribute()
    {
        if (!CanMount)
            Skip = "needs a tmpfs of its own (Linux, root or CAP_SYS_ADMIN); the read-only and full-disk cases run where mounting is allowed";
        // A write that fails on a full or read-only disk can leave a LiteDB 5.0.21 transaction whose finalizer throws
        // ("discarded page must be writable") at some later garbage collection and ends the test process; until that is
        // fixed these cases run only when asked for (DEVELOPERS.md, Reliability), not in the default suite or CI.
        else if (Environment.GetEnvironmentVariable(OptIn) != "1")
            Skip = $"disk-fault cases run with {OptIn}=1 (a LiteDB finalizer crash they can provoke is still open; see DEVELOPERS.md)";
    }

    // CAP_SYS_ADMIN is bit 21 of the effective capability set (capabilities(7)).
    public static bool CanMount
    {
        get
        {
            if (!OperatingSystem.IsLinux() || !File.Exists("/proc/self/status"))
                return false;
            string? line = File.ReadLines("/proc/self/status").FirstOrDefault(l => l.StartsWith("CapEff:", StringComparison.Ordinal));
            return line is not null
                && ulong.TryParse(line["CapEff:".Length..].Trim(), NumberStyles.HexNumber, CultureInfo.InvariantCulture, out ulong capabilities)
                && (capabilities & (1UL << 21)) != 0
                && (File.Exists("/bin/mount") || File.Exists("/usr/bin/mount"));
        }
    }
}
