using System.CommandLine;
using System.CommandLine.Help;
using DriftWatch.Charts;

namespace DriftWatch.Cli;

/// <summary>The driftwatch command line: builds the commands, runs one, and turns every failure into one line and an exit code.</summary>
public static class CliApp
{
    /// <summary>Runs the command line <paramref name="args"/>, writing results to <paramref name="output"/> and errors to <paramref name="error"/>.</summary>
    /// <returns>One of <see cref="ExitCodes"/>.</returns>
    public static int Run(string[] args, TextWriter output, TextWriter error)
    {
        ArgumentNullException.ThrowIfNull(args);
        ArgumentNullException.ThrowIfNull(output);
        ArgumentNullException.ThrowIfNull(error);
        if (args is ["--version"])
        {
            output.WriteLine(ToolVariant.VersionLine);
            return ExitCodes.Fine;
        }
        var root = Build();
        // No response files: a run name starting with '@' ('@SUM(1+1)', '@night') is a run name, not a file to read arguments from.
        var parse = root.Parse(args, new ParserConfiguration { ResponseFileTokenReplacer = null });
        if (parse.Errors.Count > 0 && parse.Action is not HelpAction)
        {
            error.WriteLine($"error: {ParseProblem(root, parse)} (see '{CommandPath(parse)} --help')");
            return ExitCodes.BadInput;
        }
        try
        {
            ToolVariant.EnsureLibTorch(parse.CommandResult.Command.Name);
            return parse.Invoke(new InvocationConfiguration
            {
                Output = output,
                Error = error,
                EnableDefaultExceptionHandler = false,
            });
        }
        catch (DriftWatchException e)
        {
            error.WriteLine($"error: {OneLine(e.Message)}");
            return ExitCodes.BadInput;
        }
        catch (Exception e)
        {
            error.WriteLine($"internal error (a bug in DriftWatch; please report it with the trace below): {e.GetType().Name}: {OneLine(e.Message)}");
            error.WriteLine(e.ToString());
            return ExitCodes.InternalError;
        }
    }

    /// <summary>The root command with every verb.</summary>
    public static RootCommand Build()
    {
        var store = CommonOptions.Store();
        var root = new RootCommand(
            "DriftWatch: read the run store a monitored training wrote; list runs, show their epochs and findings, render charts, "
            + $"write a report, compare two runs, export tidy tables, write out an epoch's weights, check the gate's verdict (exit {ExitCodes.Halt} on Halt) for a scheduler, examine a store for damage, "
            + "re-attribute stored snapshots with another method (whole, or in shards that merge joins), and follow a Python run folder. "
            + "Attributions describe the model, not causes; a Halt is advice, not proof.\n"
            + $"The store is --store PATH, else ${CommonOptions.StoreVariable}, else {CommonOptions.DefaultStoreFile} in the current folder; "
            + "only reattribute (new maps beside the originals), merge (the shards' maps, into --into) and follow (the run it watches) write to a store; no other command creates or changes one.\n"
            + "Examples:\n"
            + "  driftwatch runs --store night.litedb\n"
            + "  driftwatch report night-7 --store night.litedb --out reports\n"
            + "  driftwatch <command> --help\n"
            + ExitCodes.AllHelp)
        {
            store,
            RunsCommand.Create(store),
            ShowCommand.Create(store),
            ChartCommand.Create(store),
            CheckCommand.Create(store),
            ExamineCommand.Create(store),
            ReattributeCommand.Create(store),
            FollowCommand.Create(store),
            ReportCommand.Create(store),
            ExportCommand.Create(store),
            WeightsCommand.Create(store),
            CompareCommand.Create(store),
            MergeCommand.Create(),
            PolicyCommand.Create(),
            NeuronsCommand.Create(store),
            PruneCommand.Create(store),
        };
        return root;
    }

    // The parser's first error is not always the telling one: an unknown word is reported as a missing command.
    private static string ParseProblem(RootCommand root, ParseResult parse)
    {
        if (parse.UnmatchedTokens.Count > 0)
            return $"unknown command, option or extra argument '{OneLine(parse.UnmatchedTokens[0])}'";
        var command = parse.CommandResult.Command;
        if (command == root)
            return "no command given; use one of: " + string.Join(", ", root.Subcommands.Select(c => c.Name));
        var missing = command.Arguments.FirstOrDefault(a => !a.HasDefaultValue && parse.GetResult(a) is null or { Tokens.Count: 0 });
        if (missing is not null)
            return $"'{command.Name}' needs the <{missing.Name}> argument";
        return OneLine(parse.Errors[0].Message).TrimEnd('.');
    }

    private static string OneLine(string message) => DisplayText.Clean(message.Trim());

    private static string CommandPath(ParseResult parse)
    {
        var names = new List<string>();
        for (var result = parse.CommandResult; result is not null; result = result.Parent as System.CommandLine.Parsing.CommandResult)
            names.Add(result.Command is RootCommand ? "driftwatch" : result.Command.Name);
        names.Reverse();
        return string.Join(' ', names);
    }
}
