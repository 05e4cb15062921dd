using System.Globalization;
using System.Text;

namespace DriftWatch.Charts;

/// <summary>Makes names from users' data (runs, features) safe to show as one line of plain text in a chart or a console table.</summary>
public static class DisplayText
{
    /// <summary>
    /// Escapes control characters (<c>\n</c>, <c>\t</c>, <c>\u001B</c>…), line and paragraph separators and
    /// bidirectional overrides, so a name can neither break a line or table nor reorder what follows it;
    /// then shortens it to <paramref name="maxLength"/> characters with a trailing ellipsis.
    /// </summary>
    /// <param name="text">The name as stored.</param>
    /// <param name="maxLength">The longest result, at least 2. Default: no limit.</param>
    public static string Clean(string text, int maxLength = int.MaxValue)
    {
        ArgumentNullException.ThrowIfNull(text);
        ArgumentOutOfRangeException.ThrowIfLessThan(maxLength, 2);
        var builder = new StringBuilder(text.Length);
        foreach (char c in text)
        {
            switch (c)
            {
                case '\n':
                    builder.Append("\\n");
                    break;
                case '\r':
                    builder.Append("\\r");
                    break;
                case '\t':
                    builder.Append("\\t");
                    break;
                default:
                    if (NeedsEscape(c))
                        builder.Append("\\u").Append(((int)c).ToString("X4", CultureInfo.InvariantCulture));
                    else
                        builder.Append(c);
                    break;
            }
        }
        if (builder.Length == 0)
            return "(empty)";
        if (builder.Length <= maxLength)
            return builder.ToString();
        int cut = maxLength - 1;
        if (char.IsLowSurrogate(builder[cut]))
            cut--;
        return builder.ToString(0, cut) + "…";
    }

    private static bool NeedsEscape(char c)
    {
        if (char.IsControl(c))
            return true;
        var category = CharUnicodeInfo.GetUnicodeCategory(c);
        if (category is UnicodeCategory.LineSeparator or UnicodeCategory.ParagraphSeparator)
            return true;
        // Bidirectional marks, embeddings, overrides and isolates: they would reorder the text around a name.
        return c is '\u200E' or '\u200F' or (>= '\u202A' and <= '\u202E') or (>= '\u2066' and <= '\u2069');
    }
}
