using System.Collections.Immutable;
using System.Diagnostics;
using System.Globalization;
using System.Text;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Detection.Rules;
using DriftWatch.Hooks;
using DriftWatch.Probing;
using DriftWatch.Storage;
using TorchSharp;

namespace DriftWatch.Demo.Evaluation;

/// <summary>What one seeded scenario run showed.</summary>
/// <param name="Scenario">The scenario's command-line name.</param>
/// <param name="Seed">The seed.</param>
/// <param name="Planted">Features the generator planted as faults (should be named).</param>
/// <param name="Genuine">Features that take part in the grading rule.</param>
/// <param name="FirstNamed">Per feature named by a feature-level finding (leak, memorised identifier, probable leak), the first epoch it was named.</param>
/// <param name="Kinds">Per named feature, the finding kinds that named it.</param>
/// <param name="FirstHalt">First epoch with a Halt verdict, or null.</param>
/// <param name="FirstAttributionHalt">First epoch with a Halt raised by an attribution finding (not the loss rule), or null.</param>
/// <param name="BestEpoch">Epoch of the lowest validation loss (the oracle).</param>
/// <param name="Gl5Epoch">First epoch with GL &gt; 5 (Prechelt 1998), or null within the run.</param>
/// <param name="Seconds">Wall-clock seconds of the run.</param>
public sealed record EvaluationRun(
    string Scenario,
    int Seed,
    ImmutableArray<string> Planted,
    ImmutableArray<string> Genuine,
    ImmutableDictionary<string, int> FirstNamed,
    ImmutableDictionary<string, string> Kinds,
    int? FirstHalt,
    int? FirstAttributionHalt,
    int BestEpoch,
    int? Gl5Epoch,
    double Seconds)
{
    /// <summary>Per feature, the advisory findings of the split-consistency rules (overfitted feature, data note), as <c>kind@first epoch</c>; printed, not in runs.csv.</summary>
    public ImmutableDictionary<string, string> Notes { get; init; } = ImmutableDictionary<string, string>.Empty;
}

/// <summary>Runs the seeded scenario suite and summarises the gate against the planted truth and the GL5 rule.</summary>
public static class DetectorEvaluation
{
    // Kinds compared with the planted truth, and the loss rule attribution halts are compared with: each kind's rule says which it is.
    private static readonly FindingKind[] FeatureKinds = [.. FindingRules.Kinds.Where(k => k.Role == EvaluationRole.NamesFault).Select(k => k.Kind)];

    /// <summary>Runs every scenario × seed, writes runs.csv and summary.csv, prints the summary table, returns the runs.</summary>
    /// <remarks>With <see cref="EvaluationOptions.Shard"/>, runs that shard's block only, into its own folder; with <see cref="EvaluationOptions.MergeShards"/>, joins finished shards instead (<see cref="EvaluationShards"/>).</remarks>
    public static IReadOnlyList<EvaluationRun> Run(EvaluationOptions options, TextWriter output)
    {
        ArgumentNullException.ThrowIfNull(options);
        ArgumentNullException.ThrowIfNull(output);
        if (options.MergeShards)
            return EvaluationShards.Merge(options.OutputFolder, output);
        if (options.FromStore is { } earlier)
        {
            output.WriteLine(Invariant($"judging the runs stored in {earlier} again under the given policy (no training)"));
            var judged = new List<EvaluationRun>();
            foreach (var run in Rejudge(earlier, options.Policy, output, options.WithoutSplitCheck))
            {
                judged.Add(run);
                output.WriteLine(Line(run));
            }
            Directory.CreateDirectory(options.OutputFolder);
            WriteTables(judged, options.OutputFolder, output);
            return judged;
        }
        if (options.Shard is { } shard)
        {
            string folder = Path.Combine(options.OutputFolder, shard.Name);
            var items = shard.Slice(EvaluationShards.Items(options));
            output.WriteLine(Invariant($"shard {shard}: {items.Count} of the {options.Scenarios.Length * options.Seeds.Length} runs, into {folder}"));
            var (shardRuns, failed) = RunItems(options, items, folder, output);
            EvaluationShards.Write(folder, options, shard, items, shardRuns, failed);
            output.WriteLine($"wrote {Path.Combine(folder, EvaluationShards.ResultsFile)} and runs.csv; when every shard is done: evaluate --merge-shards --out {options.OutputFolder}");
            return shardRuns;
        }
        var (runs, _) = RunItems(options, EvaluationShards.Items(options), options.OutputFolder, output);
        WriteTables(runs, options.OutputFolder, output);
        return runs;
    }

    private static string Line(EvaluationRun run) => Invariant(
        $"  {run.Scenario,-15} seed {run.Seed,3}  best {run.BestEpoch,2}  GL5 {Show(run.Gl5Epoch),3}  halt {Show(run.FirstHalt),3}  named {(run.FirstNamed.IsEmpty ? "-" : string.Join(", ", run.FirstNamed.OrderBy(n => n.Value).Select(n => $"{n.Key}@{n.Value}({run.Kinds[n.Key]})")))}  {run.Seconds:F1} s")
        + (run.Notes.IsEmpty ? "" : "  notes " + string.Join(", ", run.Notes.OrderBy(n => n.Key, StringComparer.Ordinal).Select(n => n.Key[..n.Key.LastIndexOf(':')] + " " + n.Value)));

    /// <summary>Writes runs.csv and summary.csv into <paramref name="folder"/> and prints the summary table.</summary>
    internal static void WriteTables(IReadOnlyList<EvaluationRun> runs, string folder, TextWriter output)
    {
        var summary = Summarise(runs);
        OutputFile.WriteText(Path.Combine(folder, "runs.csv"), RunsCsv(runs));
        OutputFile.WriteText(Path.Combine(folder, "summary.csv"), SummaryCsv(summary));
        output.WriteLine();
        output.WriteLine(SummaryTable(summary));
        output.WriteLine($"wrote {Path.Combine(folder, "runs.csv")} and summary.csv");
    }

    // Trains the given scenario × seed runs into a fresh store in the folder; a run that fails inside training is recorded, not fatal.
    private static (List<EvaluationRun> Runs, List<string> Failed) RunItems(
        EvaluationOptions options, IReadOnlyList<(GreenhouseVariant Variant, int Seed)> items, string folder, TextWriter output)
    {
        Directory.CreateDirectory(folder);
        string store = Path.Combine(folder, "evaluation.litedb");
        if (File.Exists(store))
            File.Delete(store);
        output.WriteLine(Invariant($"evaluating {options.Scenarios.Length} scenarios × {options.Seeds.Length} seeds, {options.Epochs} epochs each, IG {options.Steps} steps, probe {options.ProbePerHalf} + {options.ProbePerHalf}"));
        var runs = new List<EvaluationRun>();
        var failures = new List<string>();
        foreach (var (variant, seed) in items)
        {
            EvaluationRun run;
            try
            {
                run = RunOne(variant, seed, options, store);
            }
            catch (System.Runtime.InteropServices.ExternalException e)
            {
                // A native failure inside the training loop itself (seen once, in the optimizer step): record and go on.
                output.WriteLine(Invariant($"  {GreenhouseVariants.NameOf(variant),-15} seed {seed,3}  failed inside training: {e.Message.Split('\n')[0]}"));
                failures.Add(Invariant($"{GreenhouseVariants.NameOf(variant)} seed {seed}: {e.Message.Split('\n')[0]}"));
                continue;
            }
            runs.Add(run);
            output.WriteLine(Line(run));
        }
        return (runs, failures);
    }

    /// <summary>Trains one scenario run to the end with the monitor attached and reads off what the gate did.</summary>
    public static EvaluationRun RunOne(GreenhouseVariant variant, int seed, EvaluationOptions options, string storePath)
    {
        ArgumentNullException.ThrowIfNull(options);
        var clock = Stopwatch.StartNew();
        var scenario = ScenarioBuilder.For(variant).WithSeed(seed).Build();
        torch.manual_seed(seed);
        using var model = GreenhouseNet.For(scenario);
        string name = GreenhouseVariants.NameOf(variant);
        using var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = storePath,
            RunName = Invariant($"{name}-seed{seed}-{Guid.NewGuid().ToString("N")[..8]}"),
            Schema = model.Schema,
            Probe = ProbeSet.Select(scenario.Validation.Rows, scenario.Training.Rows, options.ProbePerHalf, seed),
            Methods = [new Attribution.IntegratedGradients(options.Steps)],
            TrainingValueCounts = scenario.TrainingValueCounts,
            Policy = options.Policy,
            SaveSnapshots = false,
        });
        var records = GreenhouseTrainer.Train(scenario, model, monitor, options.Epochs, seed, stopOnHalt: false);
        return Judge(name, seed, scenario, records.Select(r => (r.Epoch, r.ValidationLoss, r.Verdict)).ToList(), clock.Elapsed.TotalSeconds);
    }

    /// <summary>
    /// Judges every run of an earlier evaluation's store again under <paramref name="policy"/>, without training: the
    /// stored maps and metrics are replayed through the detector, and each run's scenario is rebuilt from its name and seed
    /// for the planted truth. Seconds are those of the replay. A run with fewer epochs than the longest in the store stopped
    /// early (a failure inside training) and is left out, with a line on <paramref name="skipped"/> when given. With
    /// <paramref name="withoutSplitCheck"/> the runs are judged as if no split-consistency check had been stored; without it,
    /// a run stored before the check was recorded is given the one <c>ProbeSet.Select</c> computes from the rebuilt scenario.
    /// </summary>
    /// <exception cref="DriftWatchException">The store is missing or holds a run whose name is not <c>scenario-seedN-…</c>.</exception>
    public static IReadOnlyList<EvaluationRun> Rejudge(string storePath, GatePolicy policy, TextWriter? skipped = null, bool withoutSplitCheck = false)
    {
        ArgumentNullException.ThrowIfNull(storePath);
        ArgumentNullException.ThrowIfNull(policy);
        using var store = Storage.RunStore.OpenForReading(storePath);
        var result = new List<EvaluationRun>();
        var stored = store.Runs();
        var epochCounts = stored.ToDictionary(r => r.Id, r => store.Epochs(r.Id).Count);
        int longest = epochCounts.Values.DefaultIfEmpty(0).Max();
        foreach (var run in stored)
        {
            if (epochCounts[run.Id] < longest)
            {
                skipped?.WriteLine(Invariant($"  {run.Name}: left out, {epochCounts[run.Id]} of {longest} epochs stored (the run stopped early)"));
                continue;
            }
            var clock = Stopwatch.StartNew();
            int at = run.Name.LastIndexOf("-seed", StringComparison.Ordinal);
            string[] tail = at < 0 ? [] : run.Name[(at + 5)..].Split('-');
            if (at < 0 || !GreenhouseVariants.TryParse(run.Name[..at], out var variant)
                || !int.TryParse(tail[0], NumberStyles.None, CultureInfo.InvariantCulture, out int seed))
            {
                throw new DriftWatchException($"run '{run.Name}' in {storePath} was not written by evaluate (expected a name like validation-leak-seed3-…); pass a store from evaluate --out");
            }
            var scenario = ScenarioBuilder.For(variant).WithSeed(seed).Build();
            var losses = store.Epochs(run.Id).ToDictionary(e => e.Epoch, e => e.Metrics.GetValueOrDefault(MetricKeys.ValidationLoss, double.NaN));
            // A run stored before the split check was recorded gets the one ProbeSet.Select computes today from the same rows.
            var judgedRun = withoutSplitCheck ? run with { SplitCheck = null }
                : run.SplitCheck is null ? run with { SplitCheck = SplitCheckDocuments.From(SplitCheck.Run(scenario.Validation.Rows, scenario.Training.Rows, SplitCheckOptions.Default)) }
                : run;
            var judged = RunReview.Replay(store, judgedRun, policy)
                .Select(a => (a.Statistics.Epoch, losses.GetValueOrDefault(a.Statistics.Epoch, double.NaN), a.Verdict))
                .ToList();
            result.Add(Judge(GreenhouseVariants.NameOf(variant), seed, scenario, judged, clock.Elapsed.TotalSeconds));
        }
        return result;
    }

    private static EvaluationRun Judge(string name, int seed, GreenhouseScenario scenario, IReadOnlyList<(int Epoch, double ValidationLoss, Verdict Verdict)> records, double seconds)
    {
        var firstNamed = new Dictionary<string, int>();
        var kinds = new Dictionary<string, SortedSet<string>>();
        foreach (var record in records)
        {
            foreach (var finding in record.Verdict.Findings.Where(f => FeatureKinds.Contains(f.Kind)))
            {
                firstNamed.TryAdd(finding.Feature, record.Epoch);
                if (!kinds.TryGetValue(finding.Feature, out var set))
                    kinds[finding.Feature] = set = [];
                set.Add(finding.Kind.ToString());
            }
        }
        var notes = new Dictionary<string, string>();
        foreach (var record in records)
        {
            foreach (var finding in record.Verdict.Findings.Where(f => f.Kind == FindingKind.OverfittedFeature || f.Kind == FindingKind.SplitInconsistency))
                notes.TryAdd(finding.Feature + ":" + finding.Kind, Invariant($"{finding.Kind}@{record.Epoch}"));
        }
        var gl = Statistics.GeneralisationLoss(records.Select(r => r.ValidationLoss).ToArray());
        int glIndex = Array.FindIndex(gl, g => g > 5);
        return new EvaluationRun(
            name,
            seed,
            scenario.PlantedFaults,
            [.. scenario.Features.Where(f => f.Role == FeatureRole.Genuine).Select(f => f.Name)],
            firstNamed.ToImmutableDictionary(),
            kinds.ToImmutableDictionary(k => k.Key, k => string.Join("+", k.Value)),
            records.Where(r => r.Verdict.Kind == VerdictKind.Halt).Select(r => (int?)r.Epoch).FirstOrDefault(),
            records.Where(r => r.Verdict.Findings.Any(f => f.Severity == VerdictKind.Halt && f.Kind.Info.Role != EvaluationRole.LossRule)).Select(r => (int?)r.Epoch).FirstOrDefault(),
            records.MinBy(r => r.ValidationLoss).Epoch,
            glIndex < 0 ? null : records[glIndex].Epoch,
            seconds)
        {
            Notes = notes.ToImmutableDictionary(),
        };
    }

    /// <summary>Per scenario kind: how well the gate did.</summary>
    /// <param name="Scenario">Scenario name.</param>
    /// <param name="Runs">Runs.</param>
    /// <param name="PlantedNamed">Runs in which every planted feature was named.</param>
    /// <param name="PlantedNamedByGl5">Runs in which every planted feature was named at or before GL5 (or with no GL5 in the run).</param>
    /// <param name="Precision">Named planted features over all named features, pooled over runs (NaN when nothing was named).</param>
    /// <param name="Recall">Named planted features over planted features, pooled.</param>
    /// <param name="GenuineNamed">Runs that named a genuine feature.</param>
    /// <param name="ProbableLeakRuns">Runs with a probable-leak finding.</param>
    /// <param name="HaltRuns">Runs with any Halt.</param>
    /// <param name="HaltBeforeGl5">Runs whose first Halt came strictly before GL5 (all Halts when GL5 never fired).</param>
    /// <param name="MedianHaltMinusBest">Median of first Halt minus the best-validation epoch.</param>
    /// <param name="MedianHaltMinusGl5">Median of first Halt minus the GL5 epoch (negative = earlier).</param>
    /// <param name="MedianNamedMinusGl5">Median of the epoch the planted features were all named minus GL5.</param>
    public sealed record ScenarioSummary(
        string Scenario, int Runs, int PlantedNamed, int PlantedNamedByGl5, double Precision, double Recall, int GenuineNamed,
        int ProbableLeakRuns, int HaltRuns, int HaltBeforeGl5, double MedianHaltMinusBest, double MedianHaltMinusGl5, double MedianNamedMinusGl5);

    /// <summary>Summarises runs per scenario kind.</summary>
    public static IReadOnlyList<ScenarioSummary> Summarise(IReadOnlyList<EvaluationRun> runs)
    {
        ArgumentNullException.ThrowIfNull(runs);
        return runs.GroupBy(r => r.Scenario).Select(g =>
        {
            var list = g.ToList();
            int plantedTotal = list.Sum(r => r.Planted.Length);
            int plantedHit = list.Sum(r => r.Planted.Count(p => r.FirstNamed.ContainsKey(p)));
            int namedTotal = list.Sum(r => r.FirstNamed.Count);
            static int? AllNamed(EvaluationRun r) => r.Planted.IsEmpty || !r.Planted.All(r.FirstNamed.ContainsKey) ? null : r.Planted.Max(p => r.FirstNamed[p]);
            return new ScenarioSummary(
                g.Key,
                list.Count,
                list.Count(r => !r.Planted.IsEmpty && AllNamed(r) is not null),
                list.Count(r => !r.Planted.IsEmpty && AllNamed(r) is int named && (r.Gl5Epoch is null || named <= r.Gl5Epoch)),
                namedTotal == 0 ? double.NaN : (double)plantedHit / namedTotal,
                plantedTotal == 0 ? double.NaN : (double)plantedHit / plantedTotal,
                list.Count(r => r.Genuine.Any(r.FirstNamed.ContainsKey)),
                list.Count(r => r.Kinds.Values.Any(k => k.Contains(nameof(FindingKind.ProbableLeak), StringComparison.Ordinal))),
                list.Count(r => r.FirstHalt is not null),
                list.Count(r => r.FirstHalt is int h && (r.Gl5Epoch is null || h < r.Gl5Epoch)),
                Median(list.Where(r => r.FirstHalt is not null).Select(r => (double)(r.FirstHalt!.Value - r.BestEpoch))),
                Median(list.Where(r => r.FirstHalt is not null && r.Gl5Epoch is not null).Select(r => (double)(r.FirstHalt!.Value - r.Gl5Epoch!.Value))),
                Median(list.Where(r => AllNamed(r) is not null && r.Gl5Epoch is not null).Select(r => (double)(AllNamed(r)!.Value - r.Gl5Epoch!.Value))));
        }).ToList();
    }

    /// <summary>The summary as an aligned text table.</summary>
    public static string SummaryTable(IReadOnlyList<ScenarioSummary> summary)
    {
        ArgumentNullException.ThrowIfNull(summary);
        var text = new StringBuilder();
        text.AppendLine("scenario         runs  planted named  by GL5  precision  recall  genuine named  probable leak  halts  halt<GL5  halt-best  halt-GL5  named-GL5");
        foreach (var s in summary)
        {
            text.AppendLine(Invariant(
                $"{s.Scenario,-15} {s.Runs,5}  {s.PlantedNamed,13}  {s.PlantedNamedByGl5,6}  {Ratio(s.Precision),9}  {Ratio(s.Recall),6}  {s.GenuineNamed,13}  {s.ProbableLeakRuns,13}  {s.HaltRuns,5}  {s.HaltBeforeGl5,8}  {Number(s.MedianHaltMinusBest),9}  {Number(s.MedianHaltMinusGl5),8}  {Number(s.MedianNamedMinusGl5),9}"));
        }
        return text.ToString();
    }

    /// <summary>The runs as runs.csv holds them.</summary>
    internal static string RunsCsv(IReadOnlyList<EvaluationRun> runs)
    {
        var csv = new StringBuilder("scenario,seed,best_epoch,gl5_epoch,first_halt,first_attribution_halt,named,planted,seconds\n");
        foreach (var r in runs)
        {
            string named = string.Join(";", r.FirstNamed.OrderBy(n => n.Value).Select(n => Invariant($"{n.Key}@{n.Value}:{r.Kinds[n.Key]}")));
            csv.AppendLine(Invariant($"{Csv(r.Scenario)},{r.Seed},{r.BestEpoch},{Show(r.Gl5Epoch)},{Show(r.FirstHalt)},{Show(r.FirstAttributionHalt)},{Csv(named)},{Csv(string.Join(";", r.Planted))},{r.Seconds:F2}"));
        }
        return csv.ToString();
    }

    private static string SummaryCsv(IReadOnlyList<ScenarioSummary> summary)
    {
        var csv = new StringBuilder("scenario,runs,planted_named,planted_named_by_gl5,precision,recall,genuine_named,probable_leak_runs,halt_runs,halt_before_gl5,median_halt_minus_best,median_halt_minus_gl5,median_named_minus_gl5\n");
        foreach (var s in summary)
        {
            csv.AppendLine(Invariant(
                $"{Csv(s.Scenario)},{s.Runs},{s.PlantedNamed},{s.PlantedNamedByGl5},{s.Precision:F3},{s.Recall:F3},{s.GenuineNamed},{s.ProbableLeakRuns},{s.HaltRuns},{s.HaltBeforeGl5},{s.MedianHaltMinusBest:F1},{s.MedianHaltMinusGl5:F1},{s.MedianNamedMinusGl5:F1}"));
        }
        return csv.ToString();
    }

    private static double Median(IEnumerable<double> values)
    {
        var sorted = values.Order().ToArray();
        if (sorted.Length == 0)
            return double.NaN;
        return sorted.Length % 2 == 1 ? sorted[sorted.Length / 2] : (sorted[sorted.Length / 2 - 1] + sorted[sorted.Length / 2]) / 2;
    }

    private static string Csv(string value) =>
        value.IndexOfAny([',', '"', '\n', '\r']) >= 0 ? "\"" + value.Replace("\"", "\"\"", StringComparison.Ordinal) + "\"" : value;

    private static string Show(int? value) => value?.ToString(CultureInfo.InvariantCulture) ?? "-";

    private static string Ratio(double value) => double.IsNaN(value) ? "-" : value.ToString("0.00", CultureInfo.InvariantCulture);

    private static string Number(double value) => double.IsNaN(value) ? "-" : value.ToString("+0.0;-0.0;0.0", CultureInfo.InvariantCulture);

    private static string Invariant(FormattableString text) => text.ToString(CultureInfo.InvariantCulture);
}
