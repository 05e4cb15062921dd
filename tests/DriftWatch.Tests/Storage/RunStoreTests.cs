using System.Text;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Storage;

public sealed class RunStoreTests
{
    [Fact]
    public void MissingFileIsNamedAndNotCreated()
    {
        using var temp = new TempFolder();
        string path = temp.File("absent.litedb");

        var e = Assert.Throws<StoreException>(() => RunStore.OpenForReading(path));

        Assert.Contains(path, e.Message);
        Assert.Contains("does not exist", e.Message);
        Assert.False(File.Exists(path));
    }

    [Fact]
    public void FolderAsStorePathIsRefused()
    {
        using var temp = new TempFolder();
        var e = Assert.Throws<StoreException>(() => RunStore.OpenForWriting(temp.Path));
        Assert.Contains("is a folder", e.Message);
    }

    [Fact]
    public void EmptyFileIsRefusedAndLeftAlone()
    {
        using var temp = new TempFolder();
        string path = temp.File("empty.litedb");
        File.WriteAllBytes(path, []);

        Assert.Contains("empty (0 bytes)", Assert.Throws<StoreException>(() => RunStore.OpenForReading(path)).Message);
        Assert.Contains("empty (0 bytes)", Assert.Throws<StoreException>(() => RunStore.OpenForWriting(path)).Message);
        Assert.Equal(0, new FileInfo(path).Length);
    }

    [Fact]
    public void ForeignFileIsRefusedAndLeftUnchanged()
    {
        using var temp = new TempFolder();
        string path = temp.File("notes.litedb");
        var bytes = Encoding.UTF8.GetBytes(string.Concat(Enumerable.Repeat("epoch,loss\n1,0.5\n", 1000)));
        File.WriteAllBytes(path, bytes);

        var e = Assert.Throws<StoreException>(() => RunStore.OpenForWriting(path));

        Assert.Contains("not a DriftWatch store", e.Message);
        Assert.Equal(bytes, File.ReadAllBytes(path));
    }

    [Fact]
    public void TruncatedStoreIsRefusedWithItsPath()
    {
        using var temp = new TempFolder();
        string path = temp.File("runs.litedb");
        using (var store = RunStore.OpenForWriting(path))
            store.AddRun(new RunDocument { Name = "r" });
        var head = File.ReadAllBytes(path).Take(4000).ToArray();
        File.WriteAllBytes(path, head);

        var e = Assert.Throws<StoreException>(() => RunStore.OpenForReading(path));

        Assert.Contains(path, e.Message);
    }

    [Fact]
    public void ALiteDbFileOfAnotherProgramIsNotTakenOver()
    {
        using var temp = new TempFolder();
        string path = temp.File("other.litedb");
        using (var other = new LiteDB.LiteDatabase(path))
            other.GetCollection("customers").Insert(new LiteDB.BsonDocument { ["name"] = "x" });
        long before = new FileInfo(path).Length;

        var e = Assert.Throws<StoreException>(() => RunStore.OpenForWriting(path));

        Assert.Contains("another program", e.Message);
        Assert.Equal(before, new FileInfo(path).Length);
    }

    [Fact]
    public void StoreOfANewerFormatIsRefused()
    {
        using var temp = new TempFolder();
        string path = temp.File("future.litedb");
        using (RunStore.OpenForWriting(path))
        {
        }
        using (var raw = new LiteDB.LiteDatabase(path))
            raw.GetCollection("driftwatch").Update(new LiteDB.BsonDocument { ["_id"] = "format", ["version"] = RunStore.FormatVersion + 1 });

        var e = Assert.Throws<StoreException>(() => RunStore.OpenForReading(path));

        Assert.Contains("newer DriftWatch", e.Message);
    }

    [Fact]
    public void UnknownRunNamesTheRunsThereAre()
    {
        using var temp = new TempFolder();
        using var store = RunStore.OpenForWriting(temp.File("s.litedb"));
        store.AddRun(new RunDocument { Name = "night-1" });

        var e = Assert.Throws<StoreException>(() => store.GetRun("night-2"));

        Assert.Contains("night-1", e.Message);
    }
}
