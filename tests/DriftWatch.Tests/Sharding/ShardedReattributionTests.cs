using System.Globalization;
using DriftWatch.Cli;
using DriftWatch.Sharding;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using LiteDB;
using Xunit;
using static DriftWatch.Tests.Sharding.ShardKit;

namespace DriftWatch.Tests.Sharding;

/// <summary>
/// A re-attribution split into shards and merged back must be the re-attribution done in one piece: the same documents,
/// whatever the number of shards and the order they are merged in. Our own invariant (no outside source): a shard
/// computes exactly what the whole job computes for its epochs.
/// </summary>
[Collection(DemoStoreCollection.Name)]
public sealed class ShardedReattributionTests
{
    // SmoothGrad with its own seeded noise: a method whose maps depend on a random stream, so the test also shows that a
    // shard draws the same noise for an epoch as the whole job does.
    private static readonly string[] Method = ShardKit.Method;
    private const string StoredName = ShardKit.StoredName;

    private readonly DemoStoreFixture _fixture;

    public ShardedReattributionTests(DemoStoreFixture fixture) => _fixture = fixture;

    private string Copy(TempFolder temp, string name)
    {
        string store = temp.File(name);
        File.Copy(_fixture.StorePath, store);
        return store;
    }

    private string Unsharded() => WholeReattribution(_fixture, Method);

    private static string[] Shards(string store, string folder, int count, string run = DemoStoreFixture.CleanRun, string[]? extra = null, int[]? only = null)
    {
        var paths = new string[count];
        foreach (int k in only ?? Enumerable.Range(0, count).ToArray())
        {
            var (code, output, error) = RunCli(["reattribute", run, "--store", store, .. Method, .. extra ?? [],
                "--shard", string.Create(CultureInfo.InvariantCulture, $"{k}/{count}"), "--shard-folder", folder]);
            Assert.True(code == ExitCodes.Fine, error);
            paths[k] = Path.Combine(folder, new Shard(k, count).Name + ".litedb");
            Assert.Contains(paths[k], output);
            Assert.True(File.Exists(paths[k]));
        }
        return paths;
    }

    [Theory]
    [InlineData(1)]
    [InlineData(3)]
    [InlineData(4)]
    public void ShardsMergedEqualTheUnshardedReattributionExactly(int count)
    {
        using var temp = new TempFolder();
        string whole = Unsharded();
        string source = Copy(temp, "source.litedb");
        string sourceHash = Hash(source);
        var shards = Shards(source, temp.File("shards"), count);
        Assert.Equal(sourceHash, Hash(source)); // a shard only reads the store
        var shardHashes = shards.Select(Hash).ToList();

        var (code, output, error) = RunCli(["merge", .. shards.Reverse(), "--into", source]);

        Assert.True(code == ExitCodes.Fine, error + output);
        int epochs = Epochs(source, DemoStoreFixture.CleanRun).Count;
        Assert.Contains($"merged {count} of {count} shard stores (smoothgrad, stored as '{StoredName}')", output);
        Assert.Contains($"{epochs} maps added, 0 already there", output);
        Assert.Contains("complete: every epoch of the job", output);
        Assert.Equal(shardHashes, shards.Select(Hash).ToList()); // merge never alters its inputs
        var expected = Documents(whole, DemoStoreFixture.CleanRun, StoredName, withIds: true);
        Assert.Equal(2 * epochs, expected.Count);
        Assert.Equal(expected, Documents(source, DemoStoreFixture.CleanRun, StoredName, withIds: true));
    }

    [Fact]
    public void MergeOrderDoesNotMatterAndMergingTwiceChangesNothing()
    {
        using var temp = new TempFolder();
        string source = Copy(temp, "source.litedb");
        var shards = Shards(source, temp.File("shards"), 3);
        string forward = Copy(temp, "forward.litedb"), backward = Copy(temp, "backward.litedb"), oneByOne = Copy(temp, "one-by-one.litedb");

        Assert.Equal(ExitCodes.Fine, RunCli(["merge", .. shards, "--into", forward]).Code);
        Assert.Equal(ExitCodes.Fine, RunCli(["merge", shards[2], shards[0], shards[1], "--into", backward]).Code);
        foreach (int k in new[] { 1, 2, 0 })
            RunCli("merge", shards[k], "--into", oneByOne);
        string after = Hash(forward);
        var again = RunCli(["merge", .. shards, shards[1], "--into", forward]);

        var documents = Documents(forward, DemoStoreFixture.CleanRun, StoredName, withIds: true);
        Assert.NotEmpty(documents);
        Assert.Equal(documents, Documents(backward, DemoStoreFixture.CleanRun, StoredName, withIds: true));
        // Merged in three runs of merge, the maps are the same; only their store ids follow the order they arrived in.
        Assert.Equal(Documents(forward, DemoStoreFixture.CleanRun, StoredName), Documents(oneByOne, DemoStoreFixture.CleanRun, StoredName));
        Assert.True(again.Code == ExitCodes.Fine, again.Error);
        Assert.Contains($"0 maps added, {Epochs(source, DemoStoreFixture.CleanRun).Count} already there and left as they were", again.Output);
        Assert.Equal(after, Hash(forward)); // byte for byte: nothing to add, so the file is not even opened for writing
    }

    [Fact]
    public void AMissingShardIsReportedByNameAndMergingItLaterCompletesTheStore()
    {
        using var temp = new TempFolder();
        string whole = Unsharded();
        string source = Copy(temp, "source.litedb");
        var shards = Shards(source, temp.File("shards"), 4);
        var epochs = Epochs(source, DemoStoreFixture.CleanRun);
        var second = new Shard(2, 4).Slice(epochs);

        var partial = RunCli("merge", shards[0], shards[1], shards[3], "--into", source);
        var rest = RunCli("merge", shards[2], "--into", source);

        Assert.Equal(ExitCodes.Incomplete, partial.Code);
        Assert.Contains($"missing: shard-2-of-4.litedb (shard 2/4, epochs {second[0]}..{second[^1]}) was not given; run 'driftwatch reattribute {DemoStoreFixture.CleanRun} --method smoothgrad … --shard 2/4' and merge again", partial.Output);
        Assert.Contains("(exit code 4)", partial.Output);
        Assert.Equal(ExitCodes.Fine, rest.Code);
        Assert.Contains($"{second.Count} maps added, {epochs.Count - second.Count} already there", rest.Output);
        Assert.Equal(Documents(whole, DemoStoreFixture.CleanRun, StoredName), Documents(source, DemoStoreFixture.CleanRun, StoredName));
    }

    [Fact]
    public void AShardWhoseTaskStoppedEarlyIsNamedWithTheEpochsItLacks()
    {
        using var temp = new TempFolder();
        string source = Copy(temp, "source.litedb");
        var shards = Shards(source, temp.File("shards"), 4);
        var slice = new Shard(1, 4).Slice(Epochs(source, DemoStoreFixture.CleanRun));
        // What a killed task leaves: its last epoch's map was never written.
        using (var database = new LiteDatabase(new ConnectionString { Filename = shards[1], Connection = ConnectionType.Direct }))
            Assert.Equal(1, database.GetCollection("maps").DeleteMany(Query.EQ("Epoch", slice[^1])));

        var (code, output, _) = RunCli(["merge", .. shards, "--into", source]);

        Assert.Equal(ExitCodes.Incomplete, code);
        Assert.Contains($"incomplete: shard-1-of-4.litedb (shard 1/4) has no maps for epochs {slice[^1]}; its task stopped early", output);
        Assert.Contains($"{Epochs(source, DemoStoreFixture.CleanRun).Count - 1} maps added", output);
    }

    [Fact]
    public void AShardOfAnotherRunOrMethodIsRefusedAndTheTargetIsUnchanged()
    {
        using var temp = new TempFolder();
        string source = Copy(temp, "source.litedb");
        var clean = Shards(source, temp.File("clean"), 2);
        var leak = Shards(source, temp.File("leak"), 2, DemoStoreFixture.LeakRun, only: [1]);
        var otherSettings = Shards(source, temp.File("other"), 2, DemoStoreFixture.CleanRun, ["--setting", "seed=5"], only: [1]);
        var three = Shards(source, temp.File("three"), 3, only: [1]);
        string emptyStore = temp.File("empty.litedb");
        using (RunStore.OpenForWriting(emptyStore))
        {
        }
        string before = Hash(source);
        var inputs = new[] { clean[0], clean[1], leak[1], otherSettings[1], three[1] }.ToDictionary(p => p, Hash);

        var cases = new (string[] Args, string Expected)[]
        {
            ([clean[0], leak[1]], $"does not belong with '{clean[0]}': its run is '{DemoStoreFixture.LeakRun}', not '{DemoStoreFixture.CleanRun}'"),
            ([clean[0], otherSettings[1]], "its method is smoothgrad(noise=0.15, samples=4, seed=5), not smoothgrad(noise=0.15, samples=4, seed=0)"),
            ([clean[0], three[1]], "it is one of 3 shards, not one of 2"),
            ([clean[0], source], $"'{source}' is given both as a shard store and as --into"),
            ([clean[0], _fixture.StorePath], "is not a shard store (it has no shard record)"),
            ([clean[0], temp.File("shards/shard-5-of-9.litedb")], "does not exist; pass the files 'reattribute --shard K/N' wrote"),
        };
        foreach (var (args, expected) in cases)
        {
            var (code, output, error) = RunCli(["merge", .. args, "--into", source]);
            Assert.Equal(ExitCodes.BadInput, code);
            Assert.Equal("", output);
            Assert.Single(error.Trim().Split('\n'));
            Assert.Contains(expected, error);
        }
        var intoEmpty = RunCli(["merge", .. clean, "--into", emptyStore]);

        Assert.Equal(ExitCodes.BadInput, intoEmpty.Code);
        Assert.Contains($"has no run named '{DemoStoreFixture.CleanRun}'", intoEmpty.Error);
        Assert.Equal(before, Hash(source));
        Assert.All(inputs, input => Assert.Equal(input.Value, Hash(input.Key)));
    }

    [Fact]
    public void ATargetWhoseRunDiffersIsRefused()
    {
        using var temp = new TempFolder();
        string source = Copy(temp, "source.litedb");
        var shards = Shards(source, temp.File("shards"), 2);
        string other = Copy(temp, "other.litedb");
        using (var writing = RunStore.OpenForWriting(other))
        {
            var run = writing.GetRun(DemoStoreFixture.CleanRun);
            run.ModelSettings = new Dictionary<string, string>(run.ModelSettings, StringComparer.Ordinal) { ["hidden"] = "999" };
            writing.UpdateRun(run);
        }
        string before = Hash(other);

        var (code, _, error) = RunCli(["merge", .. shards, "--into", other]);

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Contains("the shards were cut from another run than the target's", error);
        Assert.Contains("has other model settings", error);
        Assert.Equal(before, Hash(other));
    }

    [Fact]
    public void AShardRunAgainResumesAndAShardFileOfAnotherJobIsNotReused()
    {
        using var temp = new TempFolder();
        string source = Copy(temp, "source.litedb");
        string folder = temp.File("shards");
        var shards = Shards(source, folder, 4);
        var before = Documents(shards[1], DemoStoreFixture.CleanRun, StoredName, withIds: true);

        var again = RunCli(["reattribute", DemoStoreFixture.CleanRun, "--store", source, .. Method, "--shard", "1/4", "--shard-folder", folder]);
        var other = RunCli(["reattribute", DemoStoreFixture.LeakRun, "--store", source, .. Method, "--shard", "1/4", "--shard-folder", folder]);
        var beyond = RunCli(["reattribute", DemoStoreFixture.CleanRun, "--store", source, .. Method, "--shard", "4/4", "--shard-folder", folder]);
        var alone = RunCli(["reattribute", DemoStoreFixture.CleanRun, "--store", source, .. Method, "--shard-folder", folder]);

        Assert.Equal(ExitCodes.Fine, again.Code);
        Assert.Contains("0 re-attributed", again.Output);
        Assert.Contains("already there (in the store or this shard store), left as they were", again.Output);
        Assert.Equal(ExitCodes.BadInput, other.Code);
        Assert.Contains("already holds another shard: its run is", other.Error);
        Assert.Equal(ExitCodes.BadInput, beyond.Code);
        Assert.Contains("--shard must be K/N with whole numbers 0 ≤ K < N", beyond.Error);
        Assert.Equal(ExitCodes.BadInput, alone.Code);
        Assert.Contains("--shard-folder goes with --shard K/N", alone.Error);
        Assert.Equal(before, Documents(shards[1], DemoStoreFixture.CleanRun, StoredName, withIds: true));
    }

    [Theory]
    [InlineData(18, 1)]
    [InlineData(18, 4)]
    [InlineData(3, 4)]
    [InlineData(200, 7)]
    public void ShardsCoverEveryItemOnceInOrderWithSizesWithinOne(int items, int count)
    {
        var all = Enumerable.Range(0, items).ToList();
        var slices = Enumerable.Range(0, count).Select(k => new Shard(k, count).Slice(all)).ToList();

        Assert.Equal(all, slices.SelectMany(s => s));
        Assert.True(slices.Max(s => s.Count) - slices.Min(s => s.Count) <= 1);
    }

    [Theory]
    [InlineData("4/4")]
    [InlineData("-1/4")]
    [InlineData("1/0")]
    [InlineData("1")]
    [InlineData("a/b")]
    [InlineData("1/2/3")]
    public void ABadShardIsRefusedWithTheFormItTakes(string text)
    {
        var error = Assert.Throws<DriftWatchException>(() => Shard.Parse(text));
        Assert.Equal($"--shard must be K/N with whole numbers 0 ≤ K < N ≤ 100000, e.g. 2/4 for the third of four shards; got '{text}'", error.Message);
    }

    [Fact]
    public void EpochListsReadAsRanges() =>
        Assert.Equal("0..4, 7, 9, 10, 12..14", Shard.Describe([0, 1, 2, 3, 4, 7, 9, 10, 12, 13, 14]));
}
