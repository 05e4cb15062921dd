using System.Runtime.InteropServices;

namespace DriftWatch.Cli;

/// <summary>The kind of a file system entry (regular file, named pipe, device, socket), read without opening it.</summary>
internal static class FileKinds
{
    /// <summary>S_IFREG: a regular file.</summary>
    public const int Regular = 0x8000;

    private const int TypeMask = 0xF000; // S_IFMT
    private const int AtCurrentFolder = -100; // AT_FDCWD
    private const int StatxType = 0x0001; // STATX_TYPE
    private const int ModeOffset = 28; // struct statx: stx_mode (u16) at byte 28 on every Linux architecture

    /// <summary>The file type bits (S_IFMT) of <paramref name="path"/>, following links; null off Linux or when it cannot be read.</summary>
    /// <remarks>
    /// .NET reports a named pipe as an ordinary file and offers no way to tell them apart without opening one (which waits
    /// for a writer), so this asks the kernel through statx(2), whose layout is the same on every Linux architecture.
    /// </remarks>
    public static int? Of(string path)
    {
        if (!OperatingSystem.IsLinux())
            return null;
        var buffer = new byte[256]; // sizeof(struct statx)
        if (Statx(AtCurrentFolder, path, 0, StatxType, buffer) != 0)
            return null;
        return BitConverter.ToUInt16(buffer, ModeOffset) & TypeMask;
    }

    /// <summary>The kind in words, e.g. "named pipe (FIFO)".</summary>
    public static string Describe(int kind) => kind switch
    {
        0x1000 => "named pipe (FIFO)",
        0x2000 => "character device",
        0x4000 => "folder",
        0x6000 => "block device",
        0xA000 => "symbolic link",
        0xC000 => "socket",
        Regular => "regular file",
        _ => "special file",
    };

    [DllImport("libc.so.6", EntryPoint = "statx")]
    [DefaultDllImportSearchPaths(DllImportSearchPath.SafeDirectories)]
    private static extern int Statx(int folder, [MarshalAs(UnmanagedType.LPUTF8Str)] string path, int flags, int mask, [Out] byte[] buffer);
}
