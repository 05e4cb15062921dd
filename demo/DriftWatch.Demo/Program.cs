using DriftWatch;
using DriftWatch.Demo;

// The greenhouse demo: see DemoOptions.Usage (--help) for the options and exit codes.
// Keep freed native memory for reuse between attribution batches, as a training script embedding the monitor may (see NativeHeap).
DriftWatch.Attribution.NativeHeap.HoldFreedMemory();
try
{
    if (args.Length > 0 && args[0] == "evaluate")
    {
        var evaluation = DriftWatch.Demo.Evaluation.EvaluationOptions.Parse(args[1..]);
        if (evaluation.Help)
        {
            Console.WriteLine(DriftWatch.Demo.Evaluation.EvaluationOptions.Usage);
            return 0;
        }
        DriftWatch.Demo.Evaluation.DetectorEvaluation.Run(evaluation, Console.Out);
        return 0;
    }
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
catch (UnauthorizedAccessException e)
{
    // The store (or another file) is one this user may not read or write; .NET's message names the path.
    Console.Error.WriteLine($"no permission: {OneLine(e.Message)} Give this user read and write permission on it, or pass another --store.");
    return 2;
}
catch (Exception e)
{
    Console.Error.WriteLine($"internal error: {OneLine(e.GetType().Name + ": " + e.Message)}");
    Console.Error.WriteLine(e.StackTrace);
    return 3;
}

static string OneLine(string message) => message.ReplaceLineEndings(" ");
