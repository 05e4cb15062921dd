using System.Globalization;
using System.Security.Cryptography;
using System.Text;

namespace DriftWatch.Charts;

/// <summary>Names chart files so any run name, whatever its characters, gives one safe file name.</summary>
public static class ChartFiles
{
    // A part keeps at most this many UTF-8 bytes, so the three parts, their hashes and ".png" stay within the 255 bytes a
    // file name may have on common file systems, whatever the script.
    private const int MaxPartBytes = 60;

    /// <summary>
    /// The file name of a chart: <c>{run}-{chart}-{method}.png</c>, each part reduced to letters and digits of any script
    /// (with their combining marks), '.', '-' and '_'; a part that had to change gets a short hash of its original, so
    /// two runs never share a file.
    /// </summary>
    public static string FileName(string runName, string chartName, string method)
    {
        ArgumentNullException.ThrowIfNull(runName);
        ArgumentNullException.ThrowIfNull(chartName);
        ArgumentNullException.ThrowIfNull(method);
        return $"{Part(runName)}-{Part(chartName)}-{Part(method)}.png";
    }

    /// <summary>
    /// One part of a file name made from any text: letters and digits of any script, '.', '-' and '_' only (each other
    /// character becomes '_'), plus a short hash of the original when it had to change.
    /// </summary>
    public static string SafePart(string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        return Part(text);
    }

    private static string Part(string text)
    {
        var builder = new StringBuilder(Math.Min(text.Length, MaxPartBytes));
        int bytes = 0;
        foreach (var rune in text.EnumerateRunes())
        {
            var kept = Kept(rune, builder.Length > 0) ? rune : new Rune('_');
            if (bytes + kept.Utf8SequenceLength > MaxPartBytes)
                break;
            builder.Append(kept.ToString());
            bytes += kept.Utf8SequenceLength;
        }
        string safe = builder.ToString();
        if (safe == text)
            return safe;
        string hash = Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(text)))[..8];
        return (safe.Length == 0 ? "run" : safe) + "_" + hash;
    }

    // Letters, digits and combining marks of any script are safe in file names; of the rest only '-', '_' and a '.' that
    // does not start the name (no hidden files, no "." or "..") are kept.
    private static bool Kept(Rune rune, bool afterStart) =>
        Rune.IsLetterOrDigit(rune)
        || Rune.GetUnicodeCategory(rune) is UnicodeCategory.NonSpacingMark or UnicodeCategory.SpacingCombiningMark
        || rune.Value is '-' or '_'
        || (rune.Value == '.' && afterStart);
}
