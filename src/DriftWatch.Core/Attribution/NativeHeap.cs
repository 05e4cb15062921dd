using System.Runtime.InteropServices;

namespace DriftWatch.Attribution;

/// <summary>
/// Settings of the C library's memory allocator, which libtorch uses for every tensor on the CPU.
/// </summary>
/// <remarks>
/// An attribution pushes thousands of expanded rows through the model at once, so each call allocates and frees tens of
/// megabytes. By default glibc hands freed memory at the top of its heap back to the system once more than a few
/// megabytes are free, and the next call takes it back page by page; on the demo model that costs as much as the model
/// evaluations themselves. <see cref="HoldFreedMemory"/> tells the allocator to keep up to a budget of freed memory for
/// reuse. It is a setting of the whole process (the training loop's tensors use the same heap), so DriftWatch never
/// makes it on its own: call it once at start-up, or set <c>GLIBC_TUNABLES=glibc.malloc.trim_threshold=268435456</c>
/// before the process starts. The command-line tool and the demo call it.
/// </remarks>
public static class NativeHeap
{
    /// <summary>The freed memory kept for reuse by default: 256 MiB.</summary>
    public const int DefaultBudgetBytes = 256 << 20;

    // Parameter numbers of mallopt, from glibc's <malloc.h>.
    private const int TrimThreshold = -1;
    private const int MapThreshold = -3;

    // glibc refuses a mapping threshold above 32 MiB on 64-bit systems.
    private const int LargestMapThreshold = 32 << 20;

    /// <summary>
    /// Asks the allocator to keep up to <paramref name="budgetBytes"/> of freed memory for reuse, and to serve blocks up
    /// to 32 MiB from its heap rather than from fresh mappings; true when the allocator took the settings.
    /// </summary>
    /// <param name="budgetBytes">Freed memory to keep, in bytes. Default <see cref="DefaultBudgetBytes"/>.</param>
    /// <returns>False on systems without glibc (Windows, macOS, musl-based Linux), where nothing changes.</returns>
    public static bool HoldFreedMemory(int budgetBytes = DefaultBudgetBytes)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(budgetBytes);
        if (!OperatingSystem.IsLinux())
            return false;
        try
        {
            bool trim = NativeMethods.Mallopt(TrimThreshold, budgetBytes) == 1;
            bool map = NativeMethods.Mallopt(MapThreshold, Math.Min(budgetBytes, LargestMapThreshold)) == 1;
            return trim && map;
        }
        catch (DllNotFoundException)
        {
            return false;
        }
        catch (EntryPointNotFoundException)
        {
            return false;
        }
    }

    private static class NativeMethods
    {
        [DllImport("libc.so.6", EntryPoint = "mallopt")]
        [DefaultDllImportSearchPaths(DllImportSearchPath.SafeDirectories)]
        public static extern int Mallopt(int parameter, int value);
    }
}
