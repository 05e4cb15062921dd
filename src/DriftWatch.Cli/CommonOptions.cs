using System.CommandLine;
using System.Globalization;
using DriftWatch.Charts;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary>Options shared by several commands, built the same way everywhere.</summary>
internal static class CommonOptions
{
    /// <summary>The environment variable that names the store when <c>--store</c> is not given.</summary>
    public const string StoreVariable = "DRIFTWATCH_STORE";

    /// <summary>The store file used when neither <c>--store</c> nor <see cref="StoreVariable"/> names one.</summary>
    public const string DefaultStoreFile = "driftwatch.litedb";

    /// <summary>The global <c>--store PATH</c> option; recursive, so it may follow the command name.</summary>
    public static Option<string> Store()
    {
        var option = new Option<string>("--store")
        {
            Description = $"The run store file (only follow creates or writes runs; reattribute adds maps beside the originals; every other command only reads it). Default: ${StoreVariable} if set, else {DefaultStoreFile} in the current folder.",
            HelpName = "PATH",
            Recursive = true,
            DefaultValueFactory = _ => DefaultStore(),
        };
        option.Validators.Add(result =>
        {
            if (string.IsNullOrWhiteSpace(result.GetValueOrDefault<string>()))
                result.AddError("--store must name a store file; got an empty path");
        });
        return option;
    }

    /// <summary>The <c>--method</c> option: which attribution method's maps to read.</summary>
    public static Option<string> Method()
    {
        var option = new Option<string>("--method")
        {
            Description = $"The attribution method whose maps to read, as the run recorded it (e.g. {RunHistory.DefaultMethod}, saliency, gradient-x-input).",
            HelpName = "NAME",
            DefaultValueFactory = _ => RunHistory.DefaultMethod,
        };
        option.Validators.Add(result =>
        {
            if (string.IsNullOrWhiteSpace(result.GetValueOrDefault<string>()))
                result.AddError("--method must name an attribution method; got an empty name");
        });
        return option;
    }

    /// <summary>An integer option that must lie in <paramref name="minimum"/>..<paramref name="maximum"/>.</summary>
    public static Option<int> Bounded(string name, string description, int defaultValue, int minimum, int maximum, string helpName = "N")
    {
        string range = $"{name} must be a whole number between {minimum} and {maximum}";
        return new Option<int>(name)
        {
            Description = description,
            HelpName = helpName,
            DefaultValueFactory = _ => defaultValue,
            // Our own parser, so a word and a number out of range get the same kind of message.
            CustomParser = result =>
            {
                if (result.Tokens.Count == 0)
                    return defaultValue;
                string text = result.Tokens[^1].Value;
                if (!int.TryParse(text, NumberStyles.Integer, CultureInfo.InvariantCulture, out int value))
                {
                    result.AddError($"{range}; got '{text}'");
                    return defaultValue;
                }
                if (value < minimum || value > maximum)
                    result.AddError($"{range}; got {value}");
                return value;
            },
        };
    }

    /// <summary>The <c>run</c> argument: a run's name as stored.</summary>
    public static Argument<string> Run() => new("run") { Description = "The run's name, as 'driftwatch runs' lists it." };

    /// <summary>Opens the store named by <c>--store</c> for reading.</summary>
    /// <exception cref="StoreException">Missing, foreign or damaged file; a folder.</exception>
    public static RunStore OpenStore(ParseResult parse, Option<string> store) =>
        RunStore.OpenForReading(parse.GetValue(store)!);

    private static string DefaultStore()
    {
        string? fromEnvironment = Environment.GetEnvironmentVariable(StoreVariable);
        return string.IsNullOrWhiteSpace(fromEnvironment) ? DefaultStoreFile : fromEnvironment;
    }
}
