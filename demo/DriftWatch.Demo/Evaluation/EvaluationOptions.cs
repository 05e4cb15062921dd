using System.Collections.Immutable;
using System.Globalization;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;

namespace DriftWatch.Demo.Evaluation;

/// <summary>Settings of the detector evaluation, parsed from <c>evaluate</c>'s command line.</summary>
public sealed record EvaluationOptions
{
    /// <summary>Scenario kinds in the default suite.</summary>
    public static ImmutableArray<GreenhouseVariant> DefaultScenarios { get; } =
    [
        GreenhouseVariant.Clean, GreenhouseVariant.LeakOnly, GreenhouseVariant.ValidationLeak, GreenhouseVariant.StrongFeature,
        GreenhouseVariant.MemorisedId, GreenhouseVariant.NoisyLabels,
    ];

    /// <summary>Scenario kinds to run.</summary>
    public ImmutableArray<GreenhouseVariant> Scenarios { get; init; } = DefaultScenarios;

    /// <summary>Seeds to run each scenario with. Default 0–9 (the reported seeds; 100–109 are for calibrating thresholds).</summary>
    public ImmutableArray<int> Seeds { get; init; } = [.. Enumerable.Range(0, 10)];

    /// <summary>Epochs per run; runs do not stop at a Halt, so the loss rule can be compared. Default 25.</summary>
    public int Epochs { get; init; } = 25;

    /// <summary>Integrated Gradients steps. Default 32.</summary>
    public int Steps { get; init; } = 32;

    /// <summary>Probe rows per half. Default 128.</summary>
    public int ProbePerHalf { get; init; } = 128;

    /// <summary>Folder for the CSV files and the evaluation store. Default <c>driftwatch-evaluation</c>.</summary>
    public string OutputFolder { get; init; } = "driftwatch-evaluation";

    /// <summary>The gate policy under test.</summary>
    public GatePolicy Policy { get; init; } = GatePolicy.Default;

    /// <summary>Run only this shard of the scenario × seed runs, into its own folder under <see cref="OutputFolder"/>. Default: null, every run.</summary>
    public Sharding.Shard? Shard { get; init; }

    /// <summary>Join the shard folders in <see cref="OutputFolder"/> into runs.csv and summary.csv instead of running anything.</summary>
    public bool MergeShards { get; init; }

    /// <summary>With <see cref="FromStore"/>: judge the runs as if no split-consistency check had been stored (the attribution-only leak rule), to compare.</summary>
    public bool WithoutSplitCheck { get; init; }

    /// <summary>Show the evaluation's help.</summary>
    public bool Help { get; init; }

    /// <summary>An evaluation store to judge again under <see cref="Policy"/> instead of training; null to train.</summary>
    public string? FromStore { get; init; }

    /// <summary>The usage text.</summary>
    public static string Usage { get; } = """
        DriftWatch detector evaluation: trains seeded greenhouse scenarios with the monitor attached (never stopping at a
        Halt), then compares the gate with the planted truth and with Prechelt's GL5 early-stopping rule.

        Usage: dotnet run --project demo/DriftWatch.Demo -c Release -- evaluate [options]

        Options:
          --seeds LIST       seeds, e.g. 0-9 or 1,4,7 (default: 0-9; keep 100-109 for calibrating thresholds)
          --scenarios LIST   comma-separated scenario names (default: clean,leak,validation-leak,strong-feature,memorised-id,noisy-labels)
          --epochs N         epochs per run, 2-200 (default: 25)
          --steps N          Integrated Gradients steps, 2-1024 (default: 32)
          --probe N          probe rows per half, 16-1024 (default: 128)
          --policy FILE      gate policy JSON (default: the built-in policy)
          --out FOLDER       where runs.csv, summary.csv and the store go (default: driftwatch-evaluation)
          --from-store FILE  train nothing: judge every run in an earlier evaluation's store again under --policy
                             (seeds and scenarios are the store's own; writes runs.csv and summary.csv to --out)
          --without-split-check
                             with --from-store: judge as if the runs had no split-consistency check (the
                             attribution-only leak rule of earlier versions), to compare with and without it
          --shard K/N        run only shard K of N (from 0): a contiguous block of the scenario × seed runs, in suite
                             order, written to FOLDER/shard-K-of-N/ (runs.csv, results.json, its own store); one Slurm
                             array task each (hooks/driftwatch-shard.sbatch)
          --merge-shards     run nothing: join FOLDER/shard-*-of-N/ into FOLDER/runs.csv and summary.csv; refuses
                             shards run with other settings and names every missing shard, writing nothing then
          -h, --help         show this help

        Exit codes: 0 done, 2 bad input (also: shards missing or of different settings at --merge-shards), 3 an internal error.
        """;

    /// <summary>Parses the arguments after <c>evaluate</c>.</summary>
    /// <exception cref="DriftWatchException">A bad option, named in the message.</exception>
    public static EvaluationOptions Parse(IReadOnlyList<string> args)
    {
        ArgumentNullException.ThrowIfNull(args);
        var options = new EvaluationOptions();
        for (int i = 0; i < args.Count; i++)
        {
            string name = args[i];
            string Value()
            {
                if (i + 1 >= args.Count)
                    throw new DriftWatchException($"{name} needs a value; see evaluate --help");
                return args[++i];
            }
            options = name switch
            {
                "-h" or "--help" => options with { Help = true },
                "--seeds" => options with { Seeds = ParseSeeds(Value()) },
                "--scenarios" => options with { Scenarios = ParseScenarios(Value()) },
                "--epochs" => options with { Epochs = Integer(name, Value(), 2, 200) },
                "--steps" => options with { Steps = Integer(name, Value(), 2, 1024) },
                "--probe" => options with { ProbePerHalf = Integer(name, Value(), 16, 1024) },
                "--policy" => options with { Policy = GatePolicy.Load(Value()) },
                "--out" => options with { OutputFolder = Value() },
                "--from-store" => options with { FromStore = Value() },
                "--shard" => options with { Shard = Sharding.Shard.Parse(Value()) },
                "--merge-shards" => options with { MergeShards = true },
                "--without-split-check" => options with { WithoutSplitCheck = true },
                _ => throw new DriftWatchException($"unknown option '{name}' for evaluate; valid options are --seeds, --scenarios, --epochs, --steps, --probe, --policy, --out, --from-store, --without-split-check, --shard, --merge-shards and --help"),
            };
        }
        if (options.Shard is not null && options.MergeShards)
            throw new DriftWatchException("--shard runs one shard and --merge-shards joins finished ones; give one of them");
        if (options.FromStore is not null && (options.Shard is not null || options.MergeShards))
            throw new DriftWatchException("--from-store judges stored runs again and trains nothing; give it without --shard or --merge-shards");
        return options;
    }

    private static ImmutableArray<int> ParseSeeds(string text)
    {
        var seeds = new List<int>();
        foreach (string part in text.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries))
        {
            var range = part.Split('-');
            if (range.Length == 1 && int.TryParse(range[0], NumberStyles.None, CultureInfo.InvariantCulture, out int one))
            {
                seeds.Add(one);
            }
            else if (range.Length == 2 && int.TryParse(range[0], NumberStyles.None, CultureInfo.InvariantCulture, out int from)
                && int.TryParse(range[1], NumberStyles.None, CultureInfo.InvariantCulture, out int to) && from <= to && to - from < 1000)
            {
                seeds.AddRange(Enumerable.Range(from, to - from + 1));
            }
            else
            {
                throw new DriftWatchException($"--seeds must be a list like 0-9 or 1,4,7; got '{text}'");
            }
        }
        if (seeds.Count == 0)
            throw new DriftWatchException($"--seeds must name at least one seed; got '{text}'");
        return [.. seeds.Distinct()];
    }

    private static ImmutableArray<GreenhouseVariant> ParseScenarios(string text)
    {
        var result = new List<GreenhouseVariant>();
        foreach (string name in text.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries))
        {
            if (!GreenhouseVariants.TryParse(name, out var variant))
                throw new DriftWatchException($"--scenarios: '{name}' is not a scenario; valid: {string.Join(", ", GreenhouseVariants.All.Select(v => v.Name))}");
            result.Add(variant);
        }
        if (result.Count == 0)
            throw new DriftWatchException("--scenarios must name at least one scenario");
        return [.. result.Distinct()];
    }

    private static int Integer(string name, string text, int min, int max)
    {
        if (!int.TryParse(text, NumberStyles.Integer, CultureInfo.InvariantCulture, out int value) || value < min || value > max)
            throw new DriftWatchException($"{name} must be a whole number between {min} and {max}; got '{text}'");
        return value;
    }
}
