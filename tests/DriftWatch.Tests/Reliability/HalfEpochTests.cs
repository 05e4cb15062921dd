using System.Text.Json;
using DriftWatch.Charts;
using DriftWatch.Cli;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// A reader never sees half an epoch. The writer's order is the monitor's: map, statistics and verdict, then the epoch
/// document, the commit marker. These tests stop a writer between them, or commit the marker between a reader's reads.
/// </summary>
public sealed class HalfEpochTests
{
    private const string Run = "half";

    [Fact]
    public void AnEpochCommittedWhileAHistoryIsReadIsLeftOutWhole()
    {
        using var temp = new TempFolder();
        string path = temp.File("half.litedb");
        var run = new StoreBuilder().WithRun(Run).WithEpochs(7).WithLeakFinding(1, 7).WithLastEpochUncommitted().Build(path);

        using var reader = RunStore.OpenForReading(path);
        int commits = 0;
        var history = RunHistory.Read(reader, Run, RunHistory.DefaultMethod, rowsOf: ["beta"], rowsOfFlagged: true, betweenReads: () =>
        {
            commits++;
            CommitEpochSeven(path, run.Id);
        });

        // Before the epoch list was read first, epoch 7 came back with its map and statistics but no verdict.
        Assert.Equal(1, commits);
        Assert.Equal([1, 2, 3, 4, 5, 6], history.Epochs.Select(e => e.Epoch));
        Assert.All(history.Epochs, e => Assert.True(e.IsAttributed && e.Verdict is not null && e.Statistics is not null, $"epoch {e.Epoch} is not whole"));
        // No finding yet at epoch 6, so the feature chart's default is the top feature of the last map: beta, then alpha.
        Assert.Equal(["beta", "alpha"], history.Rows.Select(r => r.Feature));
        Assert.All(history.Rows, r => Assert.Equal([1, 2, 3, 4, 5, 6], r.Epochs.Select(e => e.Epoch)));
        Assert.Equal([1, 2, 3, 4, 5, 6], history.WithRows(reader, ["alpha"]).Rows[0].Epochs.Select(e => e.Epoch));

        var next = RunHistory.Load(reader, Run);
        Assert.Equal(7, next.Epochs[^1].Epoch);
        Assert.All(next.Epochs, e => Assert.True(e.IsAttributed && e.Verdict is not null && e.Statistics is not null, $"epoch {e.Epoch} is not whole"));
    }

    [Fact]
    public void EveryReadingCommandShowsOnlyEpochsWhoseMarkerIsWritten()
    {
        using var temp = new TempFolder();
        string path = temp.File("half.litedb");
        var run = new StoreBuilder().WithRun(Run).WithEpochs(7).WithLeakFinding(1, 7).WithLastEpochUncommitted().Build(path);

        // Epoch 7's map, statistics and a Halt verdict are stored, its epoch document is not: every command answers for epoch 6.
        Assert.Equal(6, Answers(temp, path, ExitCodes.Fine));

        CommitEpochSeven(path, run.Id);
        Assert.Equal(7, Answers(temp, path, ExitCodes.Halt));
    }

    // Runs every reading command and returns the one last epoch they all agree on.
    private static int Answers(TempFolder temp, string path, int checkExit)
    {
        string folder = temp.File(Guid.NewGuid().ToString("N")[..8]);
        var (code, output, error) = SampleStore.Cli("runs", "--store", path, "--json");
        Assert.True(code == ExitCodes.Fine, error);
        using var runs = JsonDocument.Parse(output);
        int last = runs.RootElement[0].GetProperty("lastEpoch").GetInt32();
        Assert.Equal(last, runs.RootElement[0].GetProperty("epochs").GetInt32());
        // The verdict shown is the last whole epoch's, not the stored verdict of an epoch whose marker is missing.
        Assert.Equal(last == 7 ? "Halt" : "Continue", runs.RootElement[0].GetProperty("lastVerdict").GetString());

        (code, output, error) = SampleStore.Cli("check", Run, "--store", path, "--json");
        Assert.True(code == checkExit, $"check exited {code}: {error}");
        using (var check = JsonDocument.Parse(output))
            Assert.Equal(last, check.RootElement.GetProperty("epoch").GetInt32());

        (code, output, error) = SampleStore.Cli("show", Run, "--store", path, "--json");
        Assert.True(code == ExitCodes.Fine, error);
        using (var show = JsonDocument.Parse(output))
        {
            var epochs = show.RootElement.GetProperty("epochs").EnumerateArray().ToList();
            Assert.Equal(Enumerable.Range(1, last), epochs.Select(e => e.GetProperty("epoch").GetInt32()));
            Assert.All(epochs, e => Assert.Equal(JsonValueKind.String, e.GetProperty("verdict").ValueKind));
        }

        (code, _, error) = SampleStore.Cli("export", Run, "--store", path, "--out", Path.Combine(folder, "half.csv"));
        Assert.True(code == ExitCodes.Fine, error);
        Assert.Equal(last + 1, File.ReadAllLines(Path.Combine(folder, "half-epochs.csv")).Length);

        (code, _, error) = SampleStore.Cli("report", Run, "--store", path, "--out", folder);
        Assert.True(code == ExitCodes.Fine, error);
        string report = File.ReadAllText(Path.Combine(folder, "half-report.md"));
        Assert.Equal(last == 7, report.Contains("epoch 7", StringComparison.Ordinal));

        (code, _, error) = SampleStore.Cli("chart", Run, "--store", path, "--out", folder, "--kind", "all");
        Assert.True(code == ExitCodes.Fine, error);
        return last;
    }

    // The monitor's commit marker for epoch 7, written by a second process's handle as the monitor would.
    private static void CommitEpochSeven(string path, int runId)
    {
        using var writer = RunStore.OpenForWriting(path);
        writer.WriteEpoch(new EpochDocument
        {
            RunId = runId,
            Epoch = 7,
            Metrics = new() { [MetricKeys.TrainLoss] = 0.2, [MetricKeys.ValidationLoss] = 0.9 },
            RecordedUtc = new DateTime(2026, 1, 2, 4, 7, 0, DateTimeKind.Utc),
        });
    }
}
