using System.Diagnostics;
using System.Globalization;
using DriftWatch.Attribution;
using DriftWatch.Hooks;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using LiteDB;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Two writers at once: creating one new store file together, and a second writer opening a run another process still
/// writes (refused with one line naming that writer, unless it is gone or its heartbeat is stale).
/// </summary>
public sealed class TwoWriterTests
{
    private readonly ITestOutputHelper _output;

    public TwoWriterTests(ITestOutputHelper output) => _output = output;

    [Fact]
    public void WritersCreatingOneNewStoreAtOnceAllSucceed()
    {
        using var temp = new TempFolder();
        const int Files = 12;
        const int Writers = 4;
        var failures = new List<string>();
        for (int file = 0; file < Files; file++)
        {
            string path = temp.File(string.Create(CultureInfo.InvariantCulture, $"new-{file}.litedb"));
            using var start = new Barrier(Writers);
            var seen = new string?[Writers];
            var threads = Enumerable.Range(0, Writers).Select(i => new Thread(() =>
            {
                start.SignalAndWait();
                try
                {
                    using var store = RunStore.OpenForWriting(path);
                }
                catch (StoreException e)
                {
                    seen[i] = e.Message;
                }
            })).ToArray();
            foreach (var thread in threads)
                thread.Start();
            foreach (var thread in threads)
                thread.Join();
            failures.AddRange(seen.OfType<string>());
            using var reader = RunStore.OpenForReading(path);
            Assert.Empty(reader.StoredRuns());
        }
        foreach (string failure in failures.Distinct())
            _output.WriteLine(failure);
        _output.WriteLine($"{Files} new stores, {Writers} writers each at once: {failures.Count} failed");
        Assert.Empty(failures);
    }

    [Fact]
    public void TwoDemoProcessesCreatingOneNewStoreAtOnceBothFinish()
    {
        using var temp = new TempFolder();
        string store = temp.File("together.litedb");
        using var first = StartDemo(store, "bay-1", epochs: 2, resume: false);
        using var second = StartDemo(store, "bay-2", epochs: 2, resume: false);
        Assert.True(first.WaitForExit() == 0, first.Error);
        Assert.True(second.WaitForExit() == 0, second.Error);
        using var reader = RunStore.OpenForReading(store);
        Assert.Equal(["bay-1", "bay-2"], reader.StoredRuns().Select(r => r.Name).Order(StringComparer.Ordinal));
        Assert.Empty(reader.Verify());
    }

    [Fact]
    public void AResumeWhileAnotherProcessWritesTheRunIsRefusedAndAfterAKillItTakesOver()
    {
        using var temp = new TempFolder();
        string store = temp.File("shared.litedb");
        using var writer = StartDemo(store, "night-7", epochs: 1_000, resume: false);
        Assert.True(writer.WaitForLine(l => l.StartsWith("epoch ", StringComparison.Ordinal), count: 2), writer.Error);

        // Before the writer mark, this second process resumed the run and both wrote its epochs.
        using (var second = StartDemo(store, "night-7", epochs: 1_000, resume: true))
        {
            Assert.Equal(2, second.WaitForExit());
            string refusal = Assert.Single(second.Error.Split('\n', StringSplitOptions.RemoveEmptyEntries));
            Assert.Contains(string.Create(CultureInfo.InvariantCulture, $"run 'night-7' in '{store}' is being written by process {writer.Id} on host '{Environment.MachineName}' (monitor"), refusal, StringComparison.Ordinal);
            Assert.DoesNotContain(second.Lines, l => l.StartsWith("epoch ", StringComparison.Ordinal));
        }

        writer.Kill();
        int lastBefore;
        using (var reader = RunStore.OpenForReading(store))
            lastBefore = reader.StoredEpochs("night-7")[^1].Epoch;
        using var resumed = StartDemo(store, "night-7", epochs: lastBefore + 2, resume: true);
        Assert.True(resumed.WaitForExit() == 0, resumed.Error);
        Assert.Contains(resumed.Lines, l => l.StartsWith(string.Create(CultureInfo.InvariantCulture, $"writer    the run's earlier writer, process {writer.Id} on host '{Environment.MachineName}'"), StringComparison.Ordinal)
            && l.Contains("is no longer running on this host; this monitor takes the run over", StringComparison.Ordinal));
        using var after = RunStore.OpenForReading(store);
        var epochs = after.StoredEpochs("night-7").Select(e => e.Epoch).ToList();
        Assert.Equal(Enumerable.Range(1, lastBefore + 2), epochs);
        Assert.Null(after.WriterOf(after.FindRun("night-7")!.Id)); // let go at the end
    }

    [Fact]
    public void ASecondMonitorInThisProcessIsRefusedUntilTheFirstIsDisposed()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string store = temp.File("s.litedb");
        var first = new TrainingMonitor(Options(store, model));
        first.EndEpoch(model, 1, new EpochMetrics(0.7, 0.7));
        byte[] before = File.ReadAllBytes(store);

        var refused = Assert.Throws<StoreException>(() => new TrainingMonitor(Options(store, model) with { Resume = true }));
        Assert.Contains(string.Create(CultureInfo.InvariantCulture, $"is being written by process {Environment.ProcessId} on host '{Environment.MachineName}' (monitor, writing since"), refused.Message, StringComparison.Ordinal);
        Assert.DoesNotContain('\n', refused.Message);
        Assert.Equal(before, File.ReadAllBytes(store));

        first.Dispose();
        using var second = new TrainingMonitor(Options(store, model) with { Resume = true });
        Assert.Null(second.TookOver);
        Assert.Equal(2, second.EndEpoch(model, 2, new EpochMetrics(0.7, 0.7)).Epoch);
        Assert.Equal([1, 2], second.Store.StoredEpochs("night-7").Select(e => e.Epoch));
    }

    [Fact]
    public void AWriterWhoseProcessIsGoneFromThisHostIsTakenOver()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string store = temp.File("s.litedb");
        using (var monitor = new TrainingMonitor(Options(store, model)))
            monitor.EndEpoch(model, 1, new EpochMetrics(0.7, 0.7));
        int gone = EndedProcessId();
        Mark(store, Environment.MachineName, gone, DateTime.UtcNow);

        using var resumed = new TrainingMonitor(Options(store, model) with { Resume = true });
        Assert.StartsWith(string.Create(CultureInfo.InvariantCulture, $"the run's earlier writer, process {gone} on host '{Environment.MachineName}' (monitor"), resumed.TookOver, StringComparison.Ordinal);
        Assert.EndsWith("is no longer running on this host; this monitor takes the run over", resumed.TookOver, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData(10, false)]
    [InlineData(59, false)]
    [InlineData(61, true)]
    [InlineData(180, true)]
    public void AWriterOnAnotherHostIsTakenOverOnlyOnceItsHeartbeatIsOlderThanTheBound(int minutesSilent, bool takenOver)
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string store = temp.File("s.litedb");
        using (var monitor = new TrainingMonitor(Options(store, model)))
            monitor.EndEpoch(model, 1, new EpochMetrics(0.7, 0.7));
        Mark(store, "other-node-" + Environment.MachineName, Environment.ProcessId, DateTime.UtcNow.AddMinutes(-minutesSilent));

        var options = Options(store, model) with { Resume = true, StaleWriterAfter = TimeSpan.FromHours(1) };
        if (!takenOver)
        {
            var refused = Assert.Throws<StoreException>(() => new TrainingMonitor(options));
            Assert.Contains($"on host 'other-node-{Environment.MachineName}'", refused.Message, StringComparison.Ordinal);
            Assert.Contains("silent for over 1 h on another host", refused.Message, StringComparison.Ordinal);
            return;
        }
        using var resumed = new TrainingMonitor(options);
        Assert.Contains("has not been heard from for", resumed.TookOver, StringComparison.Ordinal);
        Assert.Contains("(over the 1 h bound for a writer on another host); this monitor takes the run over", resumed.TookOver, StringComparison.Ordinal);
    }

    [Fact]
    public void AMonitorWhoseRunWasTakenOverStoresNoMoreEpochsAndDoesNotThrowUnlessStrict()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string store = temp.File("s.litedb");
        foreach (bool strict in new[] { false, true })
        {
            string run = strict ? "strict" : "lenient";
            using var monitor = new TrainingMonitor(Options(store, model, run) with { Strict = strict });
            monitor.EndEpoch(model, 1, new EpochMetrics(0.7, 0.7));
            Mark(store, "other-node", 4242, DateTime.UtcNow, run);
            if (strict)
            {
                var thrown = Assert.Throws<StoreException>(() => monitor.EndEpoch(model, 2, new EpochMetrics(0.7, 0.7)));
                Assert.Contains("was taken over by process 4242 on host 'other-node'", thrown.Message, StringComparison.Ordinal);
            }
            else
            {
                var verdict = monitor.EndEpoch(model, 2, new EpochMetrics(0.7, 0.7));
                Assert.Contains(verdict.Reasons, r => r.Contains("was taken over by process 4242 on host 'other-node'", StringComparison.Ordinal));
            }
            using var reader = RunStore.OpenForReading(store);
            Assert.Equal([1], reader.StoredEpochs(run).Select(e => e.Epoch));
        }
    }

    private static MonitorOptions Options(string store, SmallNet model, string run = "night-7") => new()
    {
        StorePath = store,
        RunName = run,
        Schema = model.Schema,
        Probe = TestProbes.Small(),
        Methods = [new IntegratedGradients(8)],
    };

    private static ChildProcess StartDemo(string store, string run, int epochs, bool resume)
    {
        string[] args =
        [
            "--small", "--store", store, "--run", run, "--rows", "200", "--steps", "4",
            "--epochs", epochs.ToString(CultureInfo.InvariantCulture), "--keep-training",
        ];
        return ChildProcess.Start(ChildProcess.DemoDll, resume ? [.. args, "--resume"] : args);
    }

    // The id of a process that ran and ended (and was reaped), so no process runs under it now.
    private static int EndedProcessId()
    {
        using var ended = Process.Start(new ProcessStartInfo("true") { UseShellExecute = false })!;
        ended.WaitForExit();
        return ended.Id;
    }

    // A writer mark as another process leaves it, written with LiteDB directly.
    internal static void Mark(string store, string host, int processId, DateTime heartbeatUtc, string run = "night-7")
    {
        using var database = new LiteDatabase($"Filename={store};Connection=shared");
        int runId = database.GetCollection("runs").FindOne(BsonExpression.Create("$.Name = @0", new BsonValue(run)))["_id"].AsInt32;
        database.GetCollection("writers").Upsert(new BsonDocument
        {
            ["_id"] = runId,
            ["ProcessId"] = processId,
            ["Host"] = host,
            ["ProcessStartUtc"] = heartbeatUtc.AddMinutes(-5),
            ["Program"] = "monitor",
            ["Token"] = Guid.NewGuid().ToString("N"),
            ["ClaimedUtc"] = heartbeatUtc.AddMinutes(-5),
            ["HeartbeatUtc"] = heartbeatUtc,
        });
    }
}
