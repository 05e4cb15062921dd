namespace DriftWatch;

/// <summary>An expected failure with a one-line message fit to show a person: bad input, a missing or foreign file.</summary>
/// <remarks>The CLI prints <see cref="Exception.Message"/> on one line and exits with code 2.</remarks>
public class DriftWatchException : Exception
{
    /// <summary>Creates the exception with a message that names the thing, the value and what would be valid.</summary>
    public DriftWatchException(string message)
        : base(message)
    {
    }

    /// <summary>Creates the exception with a message and the failure beneath it.</summary>
    public DriftWatchException(string message, Exception inner)
        : base(message, inner)
    {
    }

    /// <summary>Creates the exception with no message; prefer the constructors that take one.</summary>
    public DriftWatchException()
        : base("DriftWatch failed")
    {
    }
}
