namespace DriftWatch.Cli;

/// <summary>The driftwatch executable.</summary>
public static class Program
{
    /// <summary>Runs the command line and returns one of <see cref="ExitCodes"/>.</summary>
    public static int Main(string[] args) => CliApp.Run(args, Console.Out, Console.Error);
}
