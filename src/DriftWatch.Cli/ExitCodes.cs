namespace DriftWatch.Cli;

/// <summary>The exit codes of every driftwatch command, in one place.</summary>
public static class ExitCodes
{
    /// <summary>The command did what was asked.</summary>
    public const int Fine = 0;

    /// <summary>The gate's verdict is Halt (returned by verdict-checking commands only).</summary>
    public const int Halt = 1;

    /// <summary>Bad input: a missing or foreign store, an unknown run or method, an option out of range. Nothing was written to the store.</summary>
    public const int BadInput = 2;

    /// <summary>An internal error: a bug in DriftWatch; the message and stack trace are printed for a report.</summary>
    public const int InternalError = 3;

    /// <summary>Merged what was given, but shards or epochs of the split are still missing (returned by <c>merge</c> only); they are named on the output.</summary>
    public const int Incomplete = 4;

    /// <summary>The exit codes as help text lists them, for commands that never return <see cref="Halt"/>.</summary>
    public static readonly string ReadingCommandsHelp = Help(
        (Fine, "done"),
        (BadInput, "bad input (missing or foreign store, unknown run or method, bad option)"),
        (InternalError, "internal error"));

    /// <summary>The full list, for the root command's help.</summary>
    public static readonly string AllHelp = Help(
        (Fine, "done"),
        (Halt, "the verdict is Halt (verdict-checking commands only)"),
        (BadInput, "bad input (missing or foreign store, unknown run or method, bad option), nothing written"),
        (InternalError, "internal error"),
        (Incomplete, "merged, but shards or epochs are still missing (merge only)"));

    /// <summary>The help text's line of exit codes: <c>Exit codes: 0 done; 2 bad input; 3 internal error.</c></summary>
    /// <param name="codes">Each code a command may return, in increasing order, with what it means for that command.</param>
    public static string Help(params ReadOnlySpan<(int Code, string Meaning)> codes)
    {
        var entries = new List<string>(codes.Length);
        foreach (var (code, meaning) in codes)
            entries.Add(string.Create(System.Globalization.CultureInfo.InvariantCulture, $"{code} {meaning}"));
        return "Exit codes: " + string.Join("; ", entries) + ".";
    }
}
