namespace DriftWatch.Demo;

/// <summary>
/// How the demo's printed commands start: the published command line, never a <c>dotnet run</c> that builds it again.
/// </summary>
internal static class CliCommand
{
    /// <summary>Where the README's set-up publishes the command line, relative to the repository root.</summary>
    internal const string PublishedPath = ".driftwatch/bin/driftwatch";

    /// <summary>The README's one set-up command that publishes it there.</summary>
    internal const string PublishCommand = "dotnet publish src/DriftWatch.Cli -c Release -o .driftwatch/bin";

    /// <summary>
    /// <c>driftwatch</c> when a program of that name is on the PATH; else the published path, with the command that
    /// publishes it when it is not there yet (<paramref name="publishFirst"/>).
    /// </summary>
    /// <param name="workingFolder">The folder the printed commands are run from.</param>
    /// <param name="path">The PATH to search (the process's own when null).</param>
    /// <param name="publishFirst">The command to run once before them, or null when the program is already there.</param>
    internal static string Prefix(string workingFolder, string? path, out string? publishFirst)
    {
        publishFirst = null;
        foreach (string folder in (path ?? "").Split(Path.PathSeparator, StringSplitOptions.RemoveEmptyEntries))
        {
            if (File.Exists(Path.Combine(folder, "driftwatch")))
                return "driftwatch";
        }
        if (!File.Exists(Path.Combine(workingFolder, PublishedPath)))
            publishFirst = PublishCommand;
        return PublishedPath;
    }
}
