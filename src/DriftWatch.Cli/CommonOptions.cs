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
            Description = $"The run store file (only follow creates or writes runs; reattribute adds maps beside the originals; merge writes to --into and ignores it; every other command only reads it). Default: ${StoreVariable} if set, else {DefaultStoreFile} in the current folder.",
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

    /// <summary>The <c>--feature NAME</c> option: one feature of the run, by its name as stored.</summary>
    public static Option<string?> Feature() => new("--feature")
    {
        Description = "A feature, by its name as the run stores it: the feature chart's feature, drawn first in the divergence chart. Default: the first feature a finding names, else the top one.",
        HelpName = "NAME",
    };

    /// <summary>The <c>--value</c> option of the heatmap.</summary>
    public static Option<string> HeatmapValueOption()
    {
        var option = new Option<string>("--value")
        {
            Description = "What the heatmap's cells show: share (held-out share of importance), signed (held-out mean signed attribution, orange below zero, blue above) or gap (training minus held-out share).",
            HelpName = "VALUE",
            DefaultValueFactory = _ => "share",
        };
        option.AcceptOnlyFromAmong("share", "signed", "gap");
        return option;
    }

    /// <summary>The <c>--width</c> option of charts.</summary>
    public static Option<int> Width() =>
        Bounded("--width", $"Picture width in pixels ({ChartSize.MinimumSide} to {ChartSize.MaximumSide}).", ChartSize.Default.Width, ChartSize.MinimumSide, ChartSize.MaximumSide, "PIXELS");

    /// <summary>The <c>--height</c> option of charts.</summary>
    public static Option<int> Height() =>
        Bounded("--height", $"Picture height in pixels ({ChartSize.MinimumSide} to {ChartSize.MaximumSide}).", ChartSize.Default.Height, ChartSize.MinimumSide, ChartSize.MaximumSide, "PIXELS");

    /// <summary>An <c>--out FOLDER</c> option with a default folder.</summary>
    public static Option<string> OutputFolder(string defaultFolder, string description)
    {
        var option = new Option<string>("--out")
        {
            Description = description,
            HelpName = "FOLDER",
            DefaultValueFactory = _ => defaultFolder,
        };
        option.Validators.Add(result =>
        {
            if (string.IsNullOrWhiteSpace(result.GetValueOrDefault<string>()))
                result.AddError("--out must name a folder; got an empty path");
        });
        return option;
    }

    /// <summary>The full path of an output folder; refuses a path that is a file.</summary>
    /// <exception cref="DriftWatchException">The path names a file.</exception>
    public static string Folder(string path)
    {
        string folder = System.IO.Path.GetFullPath(path);
        if (File.Exists(folder))
            throw new DriftWatchException($"--out '{DisplayText.Clean(folder)}' is a file; pass a folder");
        return folder;
    }

    /// <summary>The <c>--json</c> option: one JSON document on standard output instead of text.</summary>
    public static Option<bool> Json(string what) => new("--json") { Description = $"Print {what} as JSON instead of text, for scripts." };

    /// <summary>The <c>run</c> argument: a run's name as stored.</summary>
    public static Argument<string> Run() => new("run") { Description = "The run's name, exactly as 'driftwatch runs' lists it (case matters)." };

    /// <summary>Opens the store named by <c>--store</c> for reading.</summary>
    /// <exception cref="StoreException">Missing, foreign or damaged file; a folder.</exception>
    public static RunStore OpenStore(ParseResult parse, Option<string> store) =>
        OpenForReading(parse.GetValue(store)!);

    /// <summary>Opens a store for reading, as <see cref="RunStore.OpenForReading"/>, and names a file this user may not read in one line.</summary>
    /// <exception cref="StoreException">Missing, unreadable, foreign or damaged file; a folder.</exception>
    public static RunStore OpenForReading(string path)
    {
        try
        {
            return RunStore.OpenForReading(path);
        }
        catch (UnauthorizedAccessException e)
        {
            // The store's own header check opens the file before LiteDB does, outside the store's permission message.
            throw new StoreException($"no permission to read store '{DisplayText.Clean(System.IO.Path.GetFullPath(path))}' ({e.Message.ReplaceLineEndings(" ")}); give this user read permission on it (e.g. chmod u+r) or pass another --store", e);
        }
    }

    private static string DefaultStore()
    {
        string? fromEnvironment = Environment.GetEnvironmentVariable(StoreVariable);
        return string.IsNullOrWhiteSpace(fromEnvironment) ? DefaultStoreFile : fromEnvironment;
    }
}
