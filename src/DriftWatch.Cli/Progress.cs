using System.CommandLine;
using Spectre.Console;

namespace DriftWatch.Cli;

/// <summary>Progress of long work: a bar on standard error when it is a terminal, nothing when output is redirected or captured.</summary>
internal static class Progress
{
    /// <summary>Whether a bar would be shown for this invocation: the command writes to the real console, stderr is a terminal, and TERM is not <c>dumb</c>.</summary>
    public static bool Shown(ParseResult parse)
    {
        ArgumentNullException.ThrowIfNull(parse);
        return ReferenceEquals(parse.InvocationConfiguration.Error, Console.Error)
            && !Console.IsErrorRedirected
            && Environment.GetEnvironmentVariable("TERM") != "dumb"
            && string.IsNullOrEmpty(Environment.GetEnvironmentVariable("NO_COLOR"));
    }

    /// <summary>
    /// Runs <paramref name="work"/>, which calls the step action with a description before each of its <paramref name="steps"/> steps;
    /// the bar, when shown, advances with each and disappears at the end.
    /// </summary>
    public static T Run<T>(ParseResult parse, string title, int steps, Func<Action<string>, T> work)
    {
        ArgumentNullException.ThrowIfNull(work);
        if (!Shown(parse))
            return work(_ => { });
        var console = AnsiConsole.Create(new AnsiConsoleSettings { Out = new AnsiConsoleOutput(Console.Error) });
        return console.Progress()
            .AutoClear(true)
            .Columns(new TaskDescriptionColumn(), new ProgressBarColumn(), new PercentageColumn(), new ElapsedTimeColumn())
            .Start(context =>
            {
                var task = context.AddTask(Markup.Escape(title), maxValue: Math.Max(steps, 1));
                int started = 0;
                var result = work(description =>
                {
                    if (started++ > 0)
                        task.Increment(1);
                    task.Description = Markup.Escape($"{title}: {description}");
                });
                task.Value = task.MaxValue;
                return result;
            });
    }
}
