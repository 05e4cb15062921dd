using System.Text.Encodings.Web;
using System.Text.Json;

namespace DriftWatch.Cli;

/// <summary>How the commands write JSON for people and their programs: UTF-8 text as it is, never for an HTML page.</summary>
/// <remarks>
/// The default encoder escapes <c>'</c>, <c>+</c>, <c>&lt;</c> and every non-ASCII character (<c>\u0027</c>, <c>\u002B</c>) so the
/// text is safe inside HTML; command output is read in a terminal, by <c>jq</c> or by pandas, so only what JSON itself requires
/// (quotes, backslashes, control characters) is escaped. The HTML report never embeds this output.
/// </remarks>
internal static class JsonText
{
    /// <summary>One line, relaxed escaping.</summary>
    public static JsonSerializerOptions Options { get; } = new() { Encoder = JavaScriptEncoder.UnsafeRelaxedJsonEscaping };

    /// <summary>Indented, relaxed escaping.</summary>
    public static JsonSerializerOptions Indented { get; } = new() { Encoder = JavaScriptEncoder.UnsafeRelaxedJsonEscaping, WriteIndented = true };
}
