using System.Globalization;
using System.Net;
using System.Text;

namespace DriftWatch.Charts.Report;

/// <summary>Makes names from users' data safe in the report's HTML and Markdown, and formats its numbers.</summary>
public static class ReportText
{
    // CommonMark lets any ASCII punctuation be escaped with a backslash; these are the ones that can start markup
    // anywhere in a line or end a table cell. Parentheses and '!' need none: with '[' and ']' escaped no link can form.
    private const string MarkdownSpecial = "\\`*_[]<>|~&#";

    /// <summary>Text for HTML element content or a quoted attribute: control characters made visible (<see cref="DisplayText.Clean"/>), then &lt; &gt; &amp; &quot; &#39; encoded.</summary>
    public static string Html(string text, int maxLength = int.MaxValue) =>
        WebUtility.HtmlEncode(DisplayText.Clean(text ?? throw new ArgumentNullException(nameof(text)), maxLength));

    /// <summary>
    /// Text for a Markdown paragraph or table cell: control characters made visible, then every character that could
    /// start Markdown or HTML or end a table cell backslash-escaped, so <c>&lt;script&gt;</c> or <c>a|b</c> shows as written.
    /// </summary>
    public static string Markdown(string text, int maxLength = int.MaxValue)
    {
        ArgumentNullException.ThrowIfNull(text);
        string clean = DisplayText.Clean(text, maxLength);
        var builder = new StringBuilder(clean.Length + 8);
        for (int i = 0; i < clean.Length; i++)
        {
            char c = clean[i];
            // A leading + - = or a digit run followed by '.' could start a list or a heading underline.
            bool leading = i == 0 && c is '+' or '-' or '=';
            if (MarkdownSpecial.Contains(c, StringComparison.Ordinal) || leading)
                builder.Append('\\');
            builder.Append(c);
        }
        return builder.ToString();
    }

    /// <summary>Epochs as ranges, e.g. <c>2, 4–6, 9</c>.</summary>
    public static string Ranges(IEnumerable<int> epochs)
    {
        ArgumentNullException.ThrowIfNull(epochs);
        var sorted = epochs.Distinct().Order().ToList();
        var parts = new List<string>();
        int i = 0;
        while (i < sorted.Count)
        {
            int j = i;
            while (j + 1 < sorted.Count && sorted[j + 1] == sorted[j] + 1)
                j++;
            parts.Add(i == j ? Integer(sorted[i]) : $"{Integer(sorted[i])}–{Integer(sorted[j])}");
            i = j + 1;
        }
        return parts.Count == 0 ? "-" : string.Join(", ", parts);
    }

    /// <summary>An integer, invariant culture.</summary>
    public static string Integer(int value) => value.ToString(CultureInfo.InvariantCulture);

    /// <summary>A number with up to four significant decimals, invariant culture; "-" when missing or not finite.</summary>
    public static string Number(double? value) => value switch
    {
        null => "-",
        double v when !double.IsFinite(v) => "-",
        double v when v == 0 || Math.Abs(v) is >= 0.001 and < 100_000 => v.ToString("0.####", CultureInfo.InvariantCulture),
        double v => v.ToString("0.###e+0", CultureInfo.InvariantCulture),
    };

    /// <summary>A share as a percentage with one decimal.</summary>
    public static string Percent(double share) =>
        double.IsFinite(share) ? (share * 100).ToString("0.0", CultureInfo.InvariantCulture) + "%" : "-";
}
