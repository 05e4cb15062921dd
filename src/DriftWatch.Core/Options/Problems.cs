namespace DriftWatch.Options;

/// <summary>Collects every problem of a set of options, so one exception can name them all instead of the first.</summary>
/// <remarks>Not thread-safe; one per validation.</remarks>
public sealed class Problems
{
    private readonly List<string> _found = [];

    /// <summary>The problems found so far, in the order they were found.</summary>
    public IReadOnlyList<string> Found => _found;

    /// <summary>Adds a problem: one line naming the setting, the value and what would be valid.</summary>
    public void Add(string problem)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(problem);
        _found.Add(problem);
    }

    /// <summary>Adds the problem when <paramref name="bad"/> holds.</summary>
    public void AddIf(bool bad, Func<string> problem)
    {
        ArgumentNullException.ThrowIfNull(problem);
        if (bad)
            Add(problem());
    }

    /// <summary>Runs a check that throws <see cref="DriftWatchException"/>, keeping its message as a problem.</summary>
    public void Try(Action check)
    {
        ArgumentNullException.ThrowIfNull(check);
        try
        {
            check();
        }
        catch (DriftWatchException e)
        {
            Add(e.Message);
        }
    }

    /// <summary>Throws one exception naming every problem, on one line; does nothing when there is none.</summary>
    /// <param name="source">Put before the problems with a colon (e.g. a file name); null for none.</param>
    /// <exception cref="DriftWatchException">At least one problem: the message is the problem itself when there is one, else their count and each, <c>; </c>-separated.</exception>
    public void ThrowIfAny(string? source = null)
    {
        if (_found.Count == 0)
            return;
        string prefix = source is null ? "" : source + ": ";
        throw new DriftWatchException(_found.Count == 1 ? prefix + _found[0] : $"{prefix}{_found.Count} problems: {string.Join("; ", _found)}");
    }
}
