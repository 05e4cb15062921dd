using System.Globalization;
using DriftWatch.Demo.Greenhouse;

namespace DriftWatch.Demo;

/// <summary>The demo's settings, parsed from its command line.</summary>
internal sealed record DemoOptions
{
    public const int DefaultEpochs = 30;
    public const int DefaultSeed = 1;
    public const int DefaultRows = 800;
    public const int DefaultSteps = 64;
    public const int DefaultProbePerHalf = 128;
    public const int SmallEpochs = 4;
    public const int SmallSteps = 32;
    public const int SmallProbePerHalf = 32;

    /// <summary>The default store, relative to the current directory.</summary>
    public static string DefaultStore { get; } = Path.Combine("driftwatch-demo", "greenhouse.litedb");

    public string StorePath { get; init; } = DefaultStore;

    public GreenhouseVariant Variant { get; init; } = GreenhouseVariant.Default;

    public int Epochs { get; init; } = DefaultEpochs;

    public int Seed { get; init; } = DefaultSeed;

    public int Rows { get; init; } = DefaultRows;

    public int Steps { get; init; } = DefaultSteps;

    public int ProbePerHalf { get; init; } = DefaultProbePerHalf;

    public string RunName { get; init; } = "";

    public bool Small { get; init; }

    /// <summary>Continue a run the store already has, from the epoch after its last complete one.</summary>
    public bool Resume { get; init; }

    /// <summary>Train every epoch even when the gate advises stopping (the command line's default; <c>--stop-at-halt</c> turns it off).</summary>
    public bool KeepTraining { get; init; }

    /// <summary>Whether the run name was given (<c>--run</c>); a derived name that is taken gets a suffix instead of an error.</summary>
    public bool RunNamed { get; init; }

    public bool Help { get; init; }

    public static string Usage { get; } = $"""
        DriftWatch greenhouse demo: generates a seeded tomato-grading scenario with planted faults, trains a small
        model on it with the DriftWatch monitor attached, and stores every epoch's attribution maps.

        Usage: dotnet run --project demo/DriftWatch.Demo -c Release -- [options]
               dotnet run --project demo/DriftWatch.Demo -c Release -- evaluate --help   (the detector evaluation)

        Options:
          --store PATH       store file to write (default: {DefaultStore} under the current directory)
          --scenario NAME    default | clean | validation-leak | memorised-id | noisy-labels | leak | strong-feature
                             (default: default)
                               default          inspection tray leaked into training rows, near-unique crate id, noise
                               clean            no planted fault: random tray, reused crates; nothing should be flagged
                               validation-leak  the tray leak is in validation rows too; the loss cannot reveal it
                               memorised-id     only the near-unique crate id
                               noisy-labels     30% of training labels flipped, no planted feature
                               leak             only the tray leak in training rows
                               strong-feature   no fault; cultivar's effect four times as strong (a genuine feature that decides)
          --epochs N         epochs to train, 1–1000 (default: {DefaultEpochs}; --small: {SmallEpochs})
          --seed N           seed of the data, the weights and the probe set, 0–2147483647 (default: {DefaultSeed})
          --rows N           training rows, 100–100000 (default: {DefaultRows}); validation rows stay 1000
          --steps N          Integrated Gradients steps, 2–1024 (default: {DefaultSteps}; --small: {SmallSteps})
          --run NAME         run name in the store, matched exactly: Night-7 and night-7 are two runs (default: scenario
                             and seed, e.g. default-seed1, plus -small, -rowsN or -stepsN when those differ from the defaults;
                             when the store has that run already, a new run beside it: default-seed1-2, then -3, …)
          --resume           continue the run named by --run (or the derived name) from the epoch after its last complete
                             one: the weights come from that epoch's snapshot in the store, Adam's state from
                             STORE.training-state/ (fresh when missing); without a stored epoch it starts at epoch 1
          --stop-at-halt     stop training at the first Halt verdict; by default every epoch is trained with the gate
                             advising, and where it would have stopped is marked in the output and on every chart
          --keep-training    train every epoch whatever the gate says (the default; kept for older scripts)
          --small            quick settings for CI: {SmallEpochs} epochs, {SmallProbePerHalf} probe rows per half, {SmallSteps} steps
                             (options given explicitly still win)
          -h, --help         show this help

        Exit codes: 0 done (whatever the verdicts), 2 bad input (a bad option, a name given with --run that is already in
        the store without --resume, or a run that cannot be resumed),
        3 an internal error.
        """;

    /// <summary>Parses the arguments; <c>--name value</c> and <c>--name=value</c> both work.</summary>
    /// <exception cref="DriftWatchException">An unknown option, a missing value or a value out of range, named in the message.</exception>
    public static DemoOptions Parse(IReadOnlyList<string> args)
    {
        ArgumentNullException.ThrowIfNull(args);
        string? store = null, run = null;
        int? epochs = null, seed = null, rows = null, steps = null;
        var variant = GreenhouseVariant.Default;
        bool small = false, help = false, resume = false, stopAtHalt = false;

        for (int i = 0; i < args.Count; i++)
        {
            string arg = args[i];
            string name = arg;
            string? inline = null;
            int equals = arg.IndexOf('=', StringComparison.Ordinal);
            if (arg.StartsWith("--", StringComparison.Ordinal) && equals > 2)
            {
                name = arg[..equals];
                inline = arg[(equals + 1)..];
            }

            string Value(string what)
            {
                if (inline is not null)
                    return inline;
                if (i + 1 >= args.Count || args[i + 1].StartsWith("--", StringComparison.Ordinal))
                    throw new DriftWatchException($"{name} needs a value: {what}");
                return args[++i];
            }

            switch (name)
            {
                case "-h" or "--help" when inline is null:
                    help = true;
                    break;
                case "--small" when inline is null:
                    small = true;
                    break;
                case "--resume" when inline is null:
                    resume = true;
                    break;
                case "--keep-training" when inline is null:
                    stopAtHalt = false;
                    break;
                case "--stop-at-halt" when inline is null:
                    stopAtHalt = true;
                    break;
                case "--store":
                    store = Value("a file path such as runs/greenhouse.litedb");
                    if (string.IsNullOrWhiteSpace(store))
                        throw new DriftWatchException("--store must be a file path such as runs/greenhouse.litedb; got an empty value");
                    break;
                case "--scenario":
                    string scenario = Value(ScenarioNames());
                    if (!GreenhouseVariants.TryParse(scenario, out variant))
                        throw new DriftWatchException($"--scenario must be one of {ScenarioNames()}; got '{scenario}'");
                    break;
                case "--epochs":
                    epochs = Integer(name, Value("a whole number between 1 and 1000"), 1, 1000);
                    break;
                case "--seed":
                    seed = Integer(name, Value("a whole number between 0 and 2147483647"), 0, int.MaxValue);
                    break;
                case "--rows":
                    rows = Integer(name, Value("a whole number between 100 and 100000"), 100, 100_000);
                    break;
                case "--steps":
                    steps = Integer(name, Value("a whole number between 2 and 1024"), 2, 1024);
                    break;
                case "--run":
                    run = Value("a run name such as my-first-run");
                    if (string.IsNullOrWhiteSpace(run) || run.Length > 200)
                        throw new DriftWatchException($"--run must be a name of 1 to 200 characters; got '{run}'");
                    break;
                default:
                    throw new DriftWatchException(
                        $"unknown option '{arg}'; valid options are --store, --scenario, --epochs, --seed, --rows, --steps, --run, --resume, --stop-at-halt, --keep-training, --small and --help");
            }
        }

        var options = new DemoOptions
        {
            StorePath = store ?? DefaultStore,
            Variant = variant,
            Epochs = epochs ?? (small ? SmallEpochs : DefaultEpochs),
            Seed = seed ?? DefaultSeed,
            Rows = rows ?? DefaultRows,
            Steps = steps ?? (small ? SmallSteps : DefaultSteps),
            ProbePerHalf = small ? SmallProbePerHalf : DefaultProbePerHalf,
            Small = small,
            Resume = resume,
            KeepTraining = !stopAtHalt,
            RunNamed = run is not null,
            Help = help,
        };
        return options with { RunName = run ?? options.DerivedRunName() };
    }

    /// <summary>The run name when none is given: scenario and seed, plus whatever changes the run's settings.</summary>
    public string DerivedRunName()
    {
        var name = $"{GreenhouseVariants.NameOf(Variant)}-seed{Seed.ToString(CultureInfo.InvariantCulture)}";
        if (Small)
            name += "-small";
        if (Rows != DefaultRows)
            name += "-rows" + Rows.ToString(CultureInfo.InvariantCulture);
        if (Steps != (Small ? SmallSteps : DefaultSteps))
            name += "-steps" + Steps.ToString(CultureInfo.InvariantCulture);
        return name;
    }

    private static string ScenarioNames() => string.Join(", ", GreenhouseVariants.All.Select(v => v.Name));

    private static int Integer(string option, string text, int min, int max)
    {
        if (!int.TryParse(text, NumberStyles.Integer, CultureInfo.InvariantCulture, out int value) || value < min || value > max)
            throw new DriftWatchException($"{option} must be a whole number between {min} and {max}; got '{text}'");
        return value;
    }
}
