namespace DriftWatch.Cli;

/// <summary>The driftwatch executable.</summary>
public static class Program
{
    /// <summary>Runs the command line and returns one of <see cref="ExitCodes"/>.</summary>
    public static int Main(string[] args)
    {
        // Our own process: keep freed native memory for reuse between attribution batches (see NativeHeap).
        DriftWatch.Attribution.NativeHeap.HoldFreedMemory();
        return CliApp.Run(args, Console.Out, Console.Error);
    }
}
