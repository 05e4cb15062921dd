using System.Security.Cryptography;
using System.Text;

namespace DriftWatch.Charts;

/// <summary>Names chart files so any run name, whatever its characters, gives one safe file name.</summary>
public static class ChartFiles
{
    /// <summary>
    /// The file name of a chart: <c>{run}-{chart}-{method}.png</c>, each part reduced to letters, digits, '.', '-' and '_';
    /// a part that had to change gets a short hash of its original, so two runs never share a file.
    /// </summary>
    public static string FileName(string runName, string chartName, string method)
    {
        ArgumentNullException.ThrowIfNull(runName);
        ArgumentNullException.ThrowIfNull(chartName);
        ArgumentNullException.ThrowIfNull(method);
        return $"{Part(runName)}-{Part(chartName)}-{Part(method)}.png";
    }

    /// <summary>One part of a file name made from any text: letters, digits, '.', '-' and '_' only, plus a short hash of the original when it had to change.</summary>
    public static string SafePart(string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        return Part(text);
    }

    private static string Part(string text)
    {
        var builder = new StringBuilder(Math.Min(text.Length, 60));
        foreach (char c in text)
        {
            if (builder.Length == 60)
                break;
            builder.Append(char.IsAsciiLetterOrDigit(c) || c is '-' or '_' ? c : (c == '.' && builder.Length > 0 ? c : '_'));
        }
        string safe = builder.ToString();
        if (safe == text)
            return safe;
        string hash = Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(text)))[..8];
        return (safe.Length == 0 ? "run" : safe) + "_" + hash;
    }
}
