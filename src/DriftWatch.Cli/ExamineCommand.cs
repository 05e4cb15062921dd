using System.CommandLine;
using DriftWatch.Charts;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch examine</c>: looks the whole store over for damage the other commands would take for a healthy store.</summary>
internal static class ExamineCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var command = new Command(
            "examine",
            "Look the whole store over for damage that reads as healthy: a collection gone (runs, epochs, maps, verdicts, statistics, layers), "
            + "an epoch without its verdict or statistics, a record whose run id or key was changed, a damaged format record or run record. "
            + "Prints each problem on one line, or that the store is sound. Reads only; safe while training writes the store. "
            + "LiteDB keeps no checksums, so a changed number inside a record cannot be seen.\n"
            + "Examples:\n"
            + "  driftwatch examine --store /runs/store.litedb\n"
            + "  driftwatch examine --store night.litedb || cp night.backup.litedb night.litedb\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "the store is sound"),
                (ExitCodes.BadInput, "a problem was found (one line each), or the store is missing, foreign or unreadable"),
                (ExitCodes.InternalError, "internal error")));
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            using var runStore = CommonOptions.OpenStore(parse, store);
            var problems = runStore.Verify();
            string path = DisplayText.Clean(runStore.Path);
            if (problems.Count == 0)
            {
                int runs = runStore.StoredRuns().Count;
                output.WriteLine($"{path}: sound ({Formats.Integer(runs)} run{(runs == 1 ? "" : "s")})");
                return ExitCodes.Fine;
            }
            var error = parse.InvocationConfiguration.Error;
            foreach (string problem in problems)
                error.WriteLine($"problem: {DisplayText.Clean(problem)}");
            error.WriteLine($"{path}: {Formats.Integer(problems.Count)} problem{(problems.Count == 1 ? "" : "s")} found; do not trust its runs, use an intact copy");
            return ExitCodes.BadInput;
        });
        return command;
    }
}
