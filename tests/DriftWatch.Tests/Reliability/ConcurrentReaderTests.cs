using System.Diagnostics;
using System.Globalization;
using System.Text.RegularExpressions;
using DriftWatch.Cli;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// The morning-after commands run in a loop while a demo process trains and writes the same store: none fails, none sees
/// an epoch without its map, statistics and verdict, and the time the writer spends in store writes is measured with
/// and without them.
/// </summary>
public sealed partial class ConcurrentReaderTests
{
    // Enough epochs, each with enough attribution work, that the readers meet the writer on an idle machine too: at 16
    // epochs of 64 steps the writer once finished a fifth of a second after the quiet epochs, before any reader ran.
    private const int Epochs = 40;
    private const int QuietEpochs = 5;

    private readonly ITestOutputHelper _output;

    public ConcurrentReaderTests(ITestOutputHelper output) => _output = output;

    [Fact]
    public async Task ReadersWhileTrainingWritesNeverFailAndNeverSeeHalfAnEpoch()
    {
        using var temp = new TempFolder();
        string store = temp.File("busy.litedb");
        const string run = "busy";
        using var demo = ChildProcess.Start(
            ChildProcess.DemoDll,
            "--small", "--store", store, "--run", run, "--epochs", Epochs.ToString(CultureInfo.InvariantCulture),
            "--rows", "400", "--steps", "256", "--keep-training");

        // The first epochs without readers give the writer's own pace; then two readers run until training ends.
        Assert.True(demo.WaitForLine(l => EpochLine().IsMatch(l), QuietEpochs), demo.Error);
        var failures = new List<string>();
        var timings = new Dictionary<string, List<double>>();
        int consistencyChecks = 0;
        var commands = Task.Run(() =>
        {
            int i = 0;
            while (!demo.HasExited)
            {
                // Not the demo's own charts folder beside the store: its last step writes the same trend chart file.
                var args = SampleStore.ReadCommands(store, run, temp.File("reader-charts")).ElementAt(i++ % 5).ToArray();
                var clock = Stopwatch.StartNew();
                var (code, _, error) = SampleStore.Cli(args);
                Record(timings, args[0], clock.Elapsed.TotalSeconds);
                if (code is not (ExitCodes.Fine or ExitCodes.Halt))
                    Record(failures, $"{string.Join(' ', args)} exited {code}: {error.Trim()}");
            }
        });
        var consistency = Task.Run(() =>
        {
            while (!demo.HasExited)
            {
                var clock = Stopwatch.StartNew();
                CheckWholeEpochs(store, run, failures);
                Record(timings, "whole-epoch check", clock.Elapsed.TotalSeconds);
                Interlocked.Increment(ref consistencyChecks);
            }
        });
        int exit = demo.WaitForExit();
        await Task.WhenAll(commands, consistency);

        Assert.True(exit == 0, demo.Error);
        using var reader = RunStore.OpenForReading(store);
        var epochs = reader.Epochs(reader.GetRun(run).Id);
        Assert.Equal(Enumerable.Range(1, Epochs), epochs.Select(e => e.Epoch));
        // Epoch 1 also pays for warming up; the quiet epochs after it are the writer's own pace.
        var quiet = epochs.Where(e => e.Epoch is > 1 and <= QuietEpochs).Select(e => e.StoreSeconds).ToList();
        var busy = epochs.Where(e => e.Epoch > QuietEpochs + 1).Select(e => e.StoreSeconds).ToList();
        _output.WriteLine(string.Create(CultureInfo.InvariantCulture, $"""
            concurrent readers: {timings.Values.Sum(t => t.Count)} reads ({string.Join(", ", timings.OrderBy(t => t.Key, StringComparer.Ordinal).Select(t => $"{t.Value.Count} {t.Key}"))}) while {Epochs} epochs were written; {consistencyChecks} whole-epoch checks
            writer's store time per epoch: median {Median(quiet) * 1000:F0} ms, max {quiet.Max() * 1000:F0} ms without readers; median {Median(busy) * 1000:F0} ms, max {busy.Max() * 1000:F0} ms with readers (ratio of medians {Median(busy) / Median(quiet):F1})
            reader time per command (median / max, ms): {string.Join("; ", timings.OrderBy(t => t.Key, StringComparer.Ordinal).Select(t => $"{t.Key} {Median(t.Value) * 1000:F0} / {t.Value.Max() * 1000:F0}"))}
            failures: {failures.Count}
            """));
        failures.ForEach(f => _output.WriteLine("failure: " + f));
        Assert.True(consistencyChecks > 0 && timings.Count >= 5, "the readers did not get to run while training wrote");
        Finalizers.RunNow();
        Assert.Empty(failures);
    }

    // Reads epochs first, then maps, verdicts and statistics: whatever the writer commits in between, every epoch
    // already listed must have all three, exactly once.
    private static void CheckWholeEpochs(string path, string run, List<string> failures)
    {
        try
        {
            using var store = RunStore.OpenForReading(path);
            var document = store.FindRun(run);
            if (document is null)
                return;
            var epochs = store.Epochs(document.Id).Select(e => e.Epoch).ToList();
            var maps = store.Maps(document.Id).GroupBy(m => m.Epoch).ToDictionary(g => g.Key, g => g.Count());
            var verdicts = store.Verdicts(document.Id).GroupBy(v => v.Epoch).ToDictionary(g => g.Key, g => g.Count());
            var statistics = store.StatisticsOf(document.Id).GroupBy(s => s.Epoch).ToDictionary(g => g.Key, g => g.Count());
            foreach (int epoch in epochs)
            {
                if (maps.GetValueOrDefault(epoch) != 1 || verdicts.GetValueOrDefault(epoch) != 1 || statistics.GetValueOrDefault(epoch) != 1)
                    Record(failures, $"epoch {epoch} was listed with {maps.GetValueOrDefault(epoch)} maps, {verdicts.GetValueOrDefault(epoch)} verdicts, {statistics.GetValueOrDefault(epoch)} statistics");
            }
            if (!epochs.SequenceEqual(Enumerable.Range(1, epochs.Count)))
                Record(failures, $"epochs listed out of order or with gaps: {string.Join(",", epochs)}");
        }
        catch (DriftWatchException e)
        {
            Record(failures, "a reader failed: " + e.Message);
        }
    }

    private static void Record<T>(List<T> list, T item)
    {
        lock (list)
            list.Add(item);
    }

    private static void Record(Dictionary<string, List<double>> timings, string what, double seconds)
    {
        lock (timings)
        {
            if (!timings.TryGetValue(what, out var list))
                timings[what] = list = [];
            list.Add(seconds);
        }
    }

    private static double Median(IReadOnlyList<double> values)
    {
        var sorted = values.Order().ToArray();
        return sorted.Length == 0 ? double.NaN : sorted.Length % 2 == 1 ? sorted[sorted.Length / 2] : (sorted[(sorted.Length / 2) - 1] + sorted[sorted.Length / 2]) / 2;
    }

    [GeneratedRegex(@"^epoch\s+(\d+)\s")]
    private static partial Regex EpochLine();
}
