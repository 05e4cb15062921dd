using System.Text;

namespace DriftWatch;

/// <summary>
/// Writes an output file (a chart, a report, an export, a CSV) under a temporary name in its own folder and renames it
/// into place, so a failed write never leaves a partial or empty file where the finished one belongs.
/// </summary>
/// <remarks>A file already at the path stays as it was until the new one is complete.</remarks>
public static class OutputFile
{
    // errno ENOSPC on Linux, which .NET carries as the IOException's HResult there.
    private const int NoSpaceLeft = 28;

    /// <summary>Writes <paramref name="text"/> as UTF-8 without a byte-order mark to <paramref name="path"/>.</summary>
    /// <exception cref="DriftWatchException">The file cannot be written (full disk, no permission); nothing is left behind.</exception>
    public static void WriteText(string path, string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        Write(path, stream =>
        {
            using var writer = new StreamWriter(stream, new UTF8Encoding(false), leaveOpen: true);
            writer.Write(text);
        });
    }

    /// <summary>Writes <paramref name="path"/> through <paramref name="write"/>, which fills the stream it is given.</summary>
    /// <exception cref="DriftWatchException">The file cannot be written (full disk, no permission); nothing is left behind.</exception>
    public static void Write(string path, Action<Stream> write)
    {
        ArgumentNullException.ThrowIfNull(write);
        WriteAsync(path, stream =>
        {
            write(stream);
            return Task.CompletedTask;
        }).GetAwaiter().GetResult();
    }

    /// <summary>Writes <paramref name="path"/> through <paramref name="write"/>, which fills the stream it is given.</summary>
    /// <exception cref="DriftWatchException">The file cannot be written (full disk, no permission); nothing is left behind.</exception>
    public static async Task WriteAsync(string path, Func<Stream, Task> write)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        ArgumentNullException.ThrowIfNull(write);
        string full = Path.GetFullPath(path);
        string folder = Path.GetDirectoryName(full)!;
        string temporary = Path.Combine(folder, "." + Path.GetFileName(full) + "." + Guid.NewGuid().ToString("N")[..8] + ".partial");
        try
        {
            Directory.CreateDirectory(folder);
            await using (var stream = new FileStream(temporary, FileMode.CreateNew, FileAccess.Write, FileShare.None))
            {
                await write(stream).ConfigureAwait(false);
                stream.Flush(flushToDisk: true);
            }
            File.Move(temporary, full, overwrite: true);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            TryDelete(temporary);
            throw new DriftWatchException(Explain(full, e), e);
        }
        catch
        {
            TryDelete(temporary);
            throw;
        }
    }

    /// <summary>Whether <paramref name="error"/> says the disk is full.</summary>
    public static bool IsDiskFull(Exception error)
    {
        ArgumentNullException.ThrowIfNull(error);
        return error is IOException { HResult: NoSpaceLeft } || (error.InnerException is { } inner && IsDiskFull(inner));
    }

    private static string Explain(string path, Exception error) => IsDiskFull(error)
        ? $"cannot write '{path}': the disk is full (no space left on device); free some space or write to another folder"
        : error is UnauthorizedAccessException
            ? $"cannot write '{path}': no permission ({OneLine(error.Message)}); write to a folder this user may write to"
            : $"cannot write '{path}': {OneLine(error.Message)}";

    private static string OneLine(string text) => text.ReplaceLineEndings(" ");

    private static void TryDelete(string path)
    {
        try
        {
            File.Delete(path);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            // The write failed already; a leftover temporary file is named as one (".…partial") and harmless.
        }
    }
}
