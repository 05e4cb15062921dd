namespace DriftWatch.Storage;

/// <summary>A store file that is missing, foreign, damaged, of a newer format, or a run that is not there.</summary>
public sealed class StoreException : DriftWatchException
{
    /// <summary>Creates the exception.</summary>
    public StoreException(string message)
        : base(message)
    {
    }

    /// <summary>Creates the exception with the failure beneath it.</summary>
    public StoreException(string message, Exception inner)
        : base(message, inner)
    {
    }

    /// <summary>Creates the exception with a generic message.</summary>
    public StoreException()
        : base("the run store failed")
    {
    }
}
