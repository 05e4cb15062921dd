using System.Reflection;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// A write the disk refuses part-way leaves no LiteDB transaction behind whose finalizer could end the process, and the
/// store stays whole and writable once there is room again.
/// </summary>
public sealed class FailedWriteTests
{
    private readonly ITestOutputHelper _output;

    public FailedWriteTests(ITestOutputHelper output) => _output = output;

    [Fact]
    public void TheLiteDbInternalsTheClearingReadsAreThere()
    {
        // Fails after a LiteDB upgrade that renames them: then a refused write could end the process again.
        Assert.True(OrphanedTransactions.Understood, "LiteDB's TransactionMonitor/TransactionService internals changed; see OrphanedTransactions");
    }

    [Fact]
    public void TheStoreMutexHasTheNameLiteDbsSharedModeGivesIt()
    {
        // Reference: LiteDB 5.0.21 itself (SharedEngine names its mutex "Global\" + StringExtensions.Sha1(full path, lower case) + ".Mutex").
        using var temp = new TempFolder();
        string path = temp.File("Mixed Case.litedb");
        var sha1 = typeof(LiteDB.LiteDatabase).Assembly.GetType("LiteDB.StringExtensions")!
            .GetMethod("Sha1", BindingFlags.Public | BindingFlags.NonPublic | BindingFlags.Static)!;
        string expected = "Global\\" + (string)sha1.Invoke(null, [Path.GetFullPath(path).ToLower(System.Globalization.CultureInfo.CurrentCulture)])! + ".Mutex";
        Assert.Equal(expected, SharedStoreEngine.MutexName(path));
    }

    [MountFact]
    public void ATransactionRefusedByAFullDiskLeavesNothingForAFinalizer() =>
        RefuseOnAFullDisk("commit", (store, runId) => store.InOneTransaction(() =>
        {
            store.SaveSnapshot(runId, 1, new MemoryStream(Noise(1 << 20)));
            store.WriteEpoch(new EpochDocument { RunId = runId, Epoch = 1 });
        }));

    // Outside a transaction each chunk of the snapshot is its own LiteDB write (its own engine, opened and closed).
    [MountFact]
    public void ASingleWriteRefusedByAFullDiskLeavesNothingForAFinalizer() =>
        RefuseOnAFullDisk("write", (store, runId) => store.SaveSnapshot(runId, 1, new MemoryStream(Noise(1 << 20))));

    // Fills a small disk, lets the write fail on a thread that then ends, runs the finalizers (before the fix, LiteDB's
    // "discarded page must be writable" ended the test process there), and checks the store is whole and writable again.
    private void RefuseOnAFullDisk(string what, Action<RunStore, int> write)
    {
        using var disk = ScratchFileSystem.MountForTest(4 << 20, _output);
        if (disk is null)
            return;
        string path = disk.File("s.litedb");
        int runId = Prepare(path);
        string filler = disk.Fill(leave: 128 << 10);
        int before = OrphanedTransactions.Cleared;

        var refused = Assert.Throws<StoreException>(() => Finalizers.OnAThreadThatEnds(() =>
        {
            using var store = RunStore.OpenForWriting(path);
            write(store, runId);
            return 0;
        }));
        Finalizers.RunNow();

        Assert.Contains("No space left on device", refused.Message);
        int cleared = OrphanedTransactions.Cleared - before;
        Assert.True(cleared >= 1, $"the refused {what} left no transaction to clear; the test no longer reaches the failure");
        _output.WriteLine($"refused {what}: {refused.Message}; LiteDB transactions cleared: {cleared}");
        File.Delete(filler);
        AssertWholeAndWritable(path, runId);
    }

    // A store with one run and one complete epoch (with a snapshot) to check afterwards.
    private static int Prepare(string path)
    {
        using var store = RunStore.OpenForWriting(path);
        int runId = store.AddRun(new RunDocument { Name = "refused", CreatedUtc = new DateTime(2026, 1, 1, 0, 0, 0, DateTimeKind.Utc) }).Id;
        store.InOneTransaction(() =>
        {
            string snapshot = store.SaveSnapshot(runId, 0, new MemoryStream(Noise(64 << 10)));
            store.WriteEpoch(new EpochDocument { RunId = runId, Epoch = 0, SnapshotId = snapshot });
        });
        return runId;
    }

    // Epoch 0 is still whole, the refused epoch left nothing, and the same write goes through now that there is room.
    private static void AssertWholeAndWritable(string path, int runId)
    {
        using (var reader = RunStore.OpenForReading(path))
        {
            var epoch = Assert.Single(reader.Epochs(runId));
            Assert.Equal(0, epoch.Epoch);
            using var snapshot = reader.ReadSnapshot(epoch.SnapshotId!);
            Assert.Equal(Noise(64 << 10), snapshot.ToArray());
        }
        using (var store = RunStore.OpenForWriting(path))
        {
            store.InOneTransaction(() =>
            {
                string snapshot = store.SaveSnapshot(runId, 1, new MemoryStream(Noise(1 << 20)));
                store.WriteEpoch(new EpochDocument { RunId = runId, Epoch = 1, SnapshotId = snapshot });
            });
        }
        using (var reader = RunStore.OpenForReading(path))
        {
            Assert.Equal([0, 1], reader.Epochs(runId).Select(e => e.Epoch));
            using var snapshot = reader.ReadSnapshot(reader.Epochs(runId)[1].SnapshotId!);
            Assert.Equal(Noise(1 << 20), snapshot.ToArray());
        }
    }

    // Bytes that do not compress, seeded so a read-back can be compared.
    private static byte[] Noise(int length)
    {
        var bytes = new byte[length];
        new Random(length).NextBytes(bytes);
        return bytes;
    }
}
