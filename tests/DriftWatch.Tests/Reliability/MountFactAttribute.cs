using System.Globalization;
using Xunit;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// A test that mounts a scratch tmpfs. Skipped, with the reason shown, where the process may not mount — except under
/// CI, which must run it: there it runs and fails with the reason (see <see cref="ScratchFileSystem.MountForTest"/>).
/// </summary>
public sealed class MountFactAttribute : FactAttribute
{
    /// <summary>Why this machine cannot run the disk-fault cases.</summary>
    public const string NoMountReason = "needs a tmpfs of its own (Linux, root or CAP_SYS_ADMIN, and mount(8)); the read-only and full-disk cases run where mounting is allowed, and CI runs them as root";

    public MountFactAttribute()
    {
        if (!CanMount && !InCi)
            Skip = NoMountReason;
    }

    /// <summary>Whether the CI environment variable is set (CI must run every disk-fault case).</summary>
    public static bool InCi => Environment.GetEnvironmentVariable("CI") is { Length: > 0 };

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
