using System.Collections.Immutable;
using System.Globalization;
using System.Text.Json;
using System.Text.RegularExpressions;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Sharding;

namespace DriftWatch.Demo.Evaluation;

/// <summary>The settings that make evaluation shards parts of one evaluation.</summary>
/// <param name="Scenarios">Scenario names, in suite order.</param>
/// <param name="Seeds">Seeds, in suite order.</param>
/// <param name="Epochs">Epochs per run.</param>
/// <param name="Steps">Integrated Gradients steps.</param>
/// <param name="ProbePerHalf">Probe rows per half.</param>
/// <param name="Policy">The gate policy, as JSON.</param>
public sealed record EvaluationSettings(ImmutableArray<string> Scenarios, ImmutableArray<int> Seeds, int Epochs, int Steps, int ProbePerHalf, string Policy);

/// <summary>What one evaluation shard wrote to its folder's results.json.</summary>
/// <param name="Index">K.</param>
/// <param name="Count">N.</param>
/// <param name="Settings">The evaluation's settings.</param>
/// <param name="Items">The shard's runs, as <c>scenario seed N</c>.</param>
/// <param name="Runs">What each run showed.</param>
/// <param name="Failed">Runs that failed inside training, with the reason.</param>
public sealed record EvaluationShardResults(int Index, int Count, EvaluationSettings Settings, ImmutableArray<string> Items, ImmutableArray<EvaluationRun> Runs, ImmutableArray<string> Failed);

/// <summary>
/// The detector evaluation split over machines: shard K of N runs a contiguous block of the scenario × seed runs into
/// <c>OUT/shard-K-of-N/</c>; merging joins the shards' results into the evaluation's own tables (runs.csv, summary.csv).
/// </summary>
/// <remarks>
/// What is merged is the evaluation's result, its table of runs, not the stores the monitored runs were written to: those
/// stay in their shard folders for inspection. A merge refuses shards run with other settings or of another split, and
/// writes nothing while any shard is missing, since a summary over part of the suite would read as the whole.
/// </remarks>
public static partial class EvaluationShards
{
    /// <summary>The file a finished shard writes last; a shard folder without it has not finished.</summary>
    public const string ResultsFile = "results.json";

    private static readonly JsonSerializerOptions Json = new() { WriteIndented = true };

    /// <summary>Every scenario × seed run of the evaluation, in suite order (scenarios outer, seeds inner).</summary>
    public static IReadOnlyList<(GreenhouseVariant Variant, int Seed)> Items(EvaluationOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        return [.. options.Scenarios.SelectMany(v => options.Seeds.Select(s => (v, s)))];
    }

    /// <summary>The settings shards must share.</summary>
    public static EvaluationSettings SettingsOf(EvaluationOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        return new EvaluationSettings([.. options.Scenarios.Select(GreenhouseVariants.NameOf)], options.Seeds, options.Epochs, options.Steps, options.ProbePerHalf, options.Policy.ToJson());
    }

    /// <summary>Writes a finished shard's runs.csv and, last, its results.json (through a temporary file, so a stopped task leaves none).</summary>
    public static void Write(string folder, EvaluationOptions options, Shard shard, IReadOnlyList<(GreenhouseVariant Variant, int Seed)> items, IReadOnlyList<EvaluationRun> runs, IReadOnlyList<string> failed)
    {
        ArgumentNullException.ThrowIfNull(items);
        ArgumentNullException.ThrowIfNull(runs);
        ArgumentNullException.ThrowIfNull(failed);
        OutputFile.WriteText(Path.Combine(folder, "runs.csv"), DetectorEvaluation.RunsCsv(runs));
        var results = new EvaluationShardResults(shard.Index, shard.Count, SettingsOf(options), [.. items.Select(Describe)], [.. runs], [.. failed]);
        string path = Path.Combine(folder, ResultsFile);
        OutputFile.WriteText(path, JsonSerializer.Serialize(results, Json));
    }

    /// <summary>Joins the finished shard folders in <paramref name="folder"/> into its runs.csv and summary.csv.</summary>
    /// <exception cref="DriftWatchException">No shards, shards of different splits or settings, or a missing shard (named); nothing is written then.</exception>
    public static IReadOnlyList<EvaluationRun> Merge(string folder, TextWriter output)
    {
        ArgumentNullException.ThrowIfNull(folder);
        ArgumentNullException.ThrowIfNull(output);
        var found = Directory.Exists(folder)
            ? Directory.GetDirectories(folder).Select(d => (Path: d, Match: ShardFolder().Match(Path.GetFileName(d)))).Where(d => d.Match.Success).ToList()
            : [];
        if (found.Count == 0)
            throw new DriftWatchException($"no shard folders (shard-K-of-N) in '{folder}'; run evaluate --shard K/N --out {folder} for each shard first");
        var counts = found.Select(d => int.Parse(d.Match.Groups[2].Value, CultureInfo.InvariantCulture)).Distinct().Order().ToList();
        if (counts.Count > 1)
            throw new DriftWatchException($"'{folder}' holds shards of {string.Join(" and of ", counts)}; keep the folders of one split only (remove the others) and merge again");
        int count = counts[0];
        var results = new SortedDictionary<int, EvaluationShardResults>();
        foreach (var (path, match) in found)
        {
            int index = int.Parse(match.Groups[1].Value, CultureInfo.InvariantCulture);
            string file = Path.Combine(path, ResultsFile);
            if (!File.Exists(file))
                continue;
            EvaluationShardResults? read;
            try
            {
                read = JsonSerializer.Deserialize<EvaluationShardResults>(File.ReadAllText(file));
            }
            catch (JsonException e)
            {
                throw new DriftWatchException($"'{file}' is not an evaluation shard's results ({e.Message}); run that shard again");
            }
            if (read is null || read.Index != index || read.Count != count)
                throw new DriftWatchException($"'{file}' does not hold the results of shard {index}/{count}; run that shard again");
            results[index] = read;
        }
        var first = results.Values.FirstOrDefault();
        if (first is not null)
        {
            foreach (var (index, shard) in results)
            {
                if (Difference(first.Settings, shard.Settings) is { } difference)
                    throw new DriftWatchException($"shard-{index}-of-{count} was run with other settings than shard-{first.Index}-of-{count} ({difference}); run every shard with the same settings; nothing was written");
            }
        }
        var missing = Enumerable.Range(0, count).Where(k => !results.ContainsKey(k)).ToList();
        if (missing.Count > 0)
        {
            string items(int k) => first is null ? "" : " (" + Summarise(new Shard(k, count).Slice(AllItems(first.Settings))) + ")";
            throw new DriftWatchException(
                $"{missing.Count} of {count} shards have no results in '{folder}': {string.Join("; ", missing.Select(k => new Shard(k, count).Name + items(k)))}; "
                + $"run evaluate --shard K/{count} again for each with the same settings, then merge again; nothing was written");
        }
        var runs = results.Values.SelectMany(r => r.Runs).ToList();
        output.WriteLine($"merged {count} evaluation shards from {folder}: {runs.Count} runs");
        foreach (string failure in results.Values.SelectMany(r => r.Failed))
            output.WriteLine($"  failed inside training, left out: {failure}");
        DetectorEvaluation.WriteTables(runs, folder, output);
        return runs;
    }

    private static string? Difference(EvaluationSettings a, EvaluationSettings b)
    {
        if (!a.Scenarios.SequenceEqual(b.Scenarios))
            return $"scenarios {string.Join(",", b.Scenarios)}, not {string.Join(",", a.Scenarios)}";
        if (!a.Seeds.SequenceEqual(b.Seeds))
            return $"seeds {string.Join(",", b.Seeds)}, not {string.Join(",", a.Seeds)}";
        if (a.Epochs != b.Epochs)
            return $"{b.Epochs} epochs, not {a.Epochs}";
        if (a.Steps != b.Steps)
            return $"{b.Steps} steps, not {a.Steps}";
        if (a.ProbePerHalf != b.ProbePerHalf)
            return $"probe {b.ProbePerHalf}, not {a.ProbePerHalf}";
        return a.Policy != b.Policy ? "another gate policy" : null;
    }

    private static List<string> AllItems(EvaluationSettings settings) =>
        [.. settings.Scenarios.SelectMany(s => settings.Seeds.Select(seed => string.Create(CultureInfo.InvariantCulture, $"{s} seed {seed}")))];

    private static string Describe((GreenhouseVariant Variant, int Seed) item) =>
        string.Create(CultureInfo.InvariantCulture, $"{GreenhouseVariants.NameOf(item.Variant)} seed {item.Seed}");

    private static string Summarise(IReadOnlyList<string> items) =>
        items.Count == 0 ? "no runs" : items.Count <= 3 ? string.Join(", ", items) : $"{items[0]} … {items[^1]}, {items.Count} runs";

    [GeneratedRegex("^shard-([0-9]+)-of-([0-9]+)$")]
    private static partial Regex ShardFolder();
}
