using DriftWatch;
using DriftWatch.Demo;

// The greenhouse demo: see DemoOptions.Usage (--help) for the options and exit codes.
try
{
    var options = DemoOptions.Parse(args);
    if (options.Help)
    {
        Console.WriteLine(DemoOptions.Usage);
        return 0;
    }
    return GreenhouseTraining.Run(options, Console.Out);
}
catch (DriftWatchException e)
{
    Console.Error.WriteLine(OneLine(e.Message));
    return 2;
}
catch (Exception e)
{
    Console.Error.WriteLine($"internal error: {OneLine(e.GetType().Name + ": " + e.Message)}");
    Console.Error.WriteLine(e.StackTrace);
    return 3;
}

static string OneLine(string message) => message.ReplaceLineEndings(" ");
