using System.Diagnostics;
using System.Globalization;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// A small tmpfs mounted for one test, so a full disk and a file system turning read-only are real, not simulated.
/// Needs root (or CAP_SYS_ADMIN); <see cref="TryMount"/> returns null where mounting is not allowed.
/// </summary>
internal sealed class ScratchFileSystem : IDisposable
{
    private ScratchFileSystem(string path, long bytes)
    {
        Path = path;
        Bytes = bytes;
    }

    public string Path { get; }

    public long Bytes { get; }

    public string File(string name) => System.IO.Path.Combine(Path, name);

    /// <summary>Mounts a tmpfs of <paramref name="bytes"/> bytes; null when this machine does not let the tests mount.</summary>
    public static ScratchFileSystem? TryMount(long bytes)
    {
        if (!OperatingSystem.IsLinux())
            return null;
        string path = System.IO.Path.Combine(System.IO.Path.GetTempPath(), "driftwatch-tmpfs-" + Guid.NewGuid().ToString("N")[..12]);
        Directory.CreateDirectory(path);
        if (Run("mount", "-t", "tmpfs", "-o", "size=" + bytes.ToString(CultureInfo.InvariantCulture), "tmpfs", path) != 0)
        {
            Directory.Delete(path);
            return null;
        }
        return new ScratchFileSystem(path, bytes);
    }

    /// <summary>
    /// Mounts a tmpfs for a <see cref="MountFactAttribute"/> test; null (the test returns early, with the reason written
    /// to its output) where mounting failed outside CI. Under CI a failed mount fails the test.
    /// </summary>
    public static ScratchFileSystem? MountForTest(long bytes, Xunit.Abstractions.ITestOutputHelper output)
    {
        var disk = TryMount(bytes);
        if (disk is not null)
            return disk;
        if (MountFactAttribute.InCi)
            Xunit.Assert.Fail($"CI must run the disk-fault tests, but mounting a tmpfs failed: {MountFactAttribute.NoMountReason}");
        output.WriteLine($"not run: mounting a tmpfs failed; {MountFactAttribute.NoMountReason}");
        return null;
    }

    /// <summary>Remounts read-only (every write fails with EROFS) or read-write again.</summary>
    public void SetReadOnly(bool readOnly)
    {
        if (Run("mount", "-o", readOnly ? "remount,ro" : "remount,rw", Path) != 0)
            throw new InvalidOperationException($"could not remount {Path} {(readOnly ? "read-only" : "read-write")}");
    }

    /// <summary>Fills the file system until fewer than <paramref name="leave"/> bytes are free; returns the filler file.</summary>
    public string Fill(long leave)
    {
        string filler = File("filler.bin");
        var block = new byte[4096];
        using var stream = new FileStream(filler, FileMode.Append, FileAccess.Write);
        try
        {
            while (new DriveInfo(Path).AvailableFreeSpace > leave)
            {
                stream.Write(block);
                stream.Flush();
            }
        }
        catch (IOException)
        {
            // Already full.
        }
        return filler;
    }

    public void Dispose()
    {
        Run("umount", "-l", Path);
        try
        {
            Directory.Delete(Path, recursive: true);
        }
        catch (IOException)
        {
        }
    }

    private static int Run(string program, params string[] args)
    {
        var start = new ProcessStartInfo(program) { RedirectStandardError = true, RedirectStandardOutput = true, UseShellExecute = false };
        foreach (string arg in args)
            start.ArgumentList.Add(arg);
        try
        {
            using var process = Process.Start(start)!;
            process.WaitForExit();
            return process.ExitCode;
        }
        catch (System.ComponentModel.Win32Exception)
        {
            return -1; // no such program
        }
    }
}
