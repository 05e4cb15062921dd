using DriftWatch.Attribution;
using DriftWatch.Cli;
using DriftWatch.Hooks;
using DriftWatch.Layers;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using LiteDB;
using Xunit;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Damage that reads as healthy: a collection gone, an epoch's run id changed, a format record without a valid version.
/// The store check (<see cref="RunStore.Verify"/>, the CLI's <c>examine</c>) finds each one, and <c>check</c> refuses
/// such a store with one line and exit 2 instead of answering from it.
/// </summary>
public sealed class StoreDamageTests : IClassFixture<StoreDamageTests.SoundStore>
{
    private readonly SoundStore _sound;

    public StoreDamageTests(SoundStore sound) => _sound = sound;

    /// <summary>A store a monitor wrote: one run, three epochs, a watched layer; built once for the class.</summary>
    public sealed class SoundStore : IDisposable
    {
        private readonly TempFolder _folder = new();

        public SoundStore()
        {
            Path = _folder.File("sound.litedb");
            using var model = new SmallNet(3, 5, 4);
            using var monitor = new TrainingMonitor(new MonitorOptions
            {
                StorePath = Path,
                RunName = "night-7",
                Schema = model.Schema,
                Probe = TestProbes.Small(),
                Methods = [new IntegratedGradients(8)],
                WatchedLayers = ["_body.1"],
                LayerMethods = [new LayerActivation()],
                WatchedModel = model,
            });
            for (int epoch = 1; epoch <= 3; epoch++)
                monitor.EndEpoch(model, epoch, new EpochMetrics(0.7, 0.7));
        }

        public string Path { get; }

        public void Dispose() => _folder.Dispose();
    }

    // Each kind of damage, done with LiteDB directly, and a word the problem line must carry.
    public static TheoryData<string, string> Damage => new()
    {
        { "drop verdicts", "'verdicts' is missing" },
        { "drop epochs", "'epochs' is missing" },
        { "drop maps", "'maps' is missing" },
        { "drop statistics", "'statistics' is missing" },
        { "drop layers", "'layers' is missing" },
        { "epoch run id", "has key '1/000002', not '9/000002'" },
        { "epoch run id and key", "belongs to no run" },
        { "verdict gone", "epoch 3 of run 'night-7' has no verdict" },
        { "map run id", "names run id 9" },
        { "format version missing", "damaged format record" },
        { "format version null", "damaged format record" },
        { "format version -1", "damaged format record" },
    };

    [Theory]
    [MemberData(nameof(Damage))]
    public void EachDamageIsFoundByExamineAndCheckRefusesTheStore(string damage, string expected)
    {
        using var temp = new TempFolder();
        string path = temp.File("damaged.litedb");
        File.Copy(_sound.Path, path);
        Apply(path, damage);

        var problems = Problems(path);
        Assert.Contains(problems, p => p.Contains(expected, StringComparison.Ordinal));

        var examined = SampleStore.Cli("examine", "--store", path);
        Assert.Equal(ExitCodes.BadInput, examined.Code);
        Assert.Contains(expected, examined.Error, StringComparison.Ordinal);
        Assert.All(examined.Error.Split('\n', StringSplitOptions.RemoveEmptyEntries), line => Assert.DoesNotContain("   at ", line, StringComparison.Ordinal));

        var checkedRun = SampleStore.Cli("check", "night-7", "--store", path);
        Assert.Equal(ExitCodes.BadInput, checkedRun.Code);
        Assert.Single(checkedRun.Error.Split('\n', StringSplitOptions.RemoveEmptyEntries));
        // A damaged format record is refused when the store is opened; the rest when check examines the opened store.
        Assert.Contains(damage.StartsWith("format", StringComparison.Ordinal) ? expected : "cannot be trusted", checkedRun.Error, StringComparison.Ordinal);
    }

    [Fact]
    public void ASoundStoreAndTheFormatOneSampleAreSoundAndCheckAnswers()
    {
        Assert.Empty(Problems(_sound.Path));
        var examined = SampleStore.Cli("examine", "--store", _sound.Path);
        Assert.Equal(ExitCodes.Fine, examined.Code);
        Assert.Contains("sound (1 run)", examined.Output, StringComparison.Ordinal);
        Assert.Equal(ExitCodes.Fine, SampleStore.Cli("check", "night-7", "--store", _sound.Path).Code);

        using var temp = new TempFolder();
        string sample = SampleStore.CopyTo(temp.Path);
        byte[] before = File.ReadAllBytes(sample);
        Assert.Empty(Problems(sample));
        Assert.Equal(ExitCodes.Fine, SampleStore.Cli("examine", "--store", sample).Code);
        Assert.Equal(before, File.ReadAllBytes(sample)); // examine reads only
    }

    [Fact]
    public void AStoreWhoseVerdictsAreGoneNoLongerSaysNoCompleteEpochYet()
    {
        using var temp = new TempFolder();
        string path = temp.File("no-verdicts.litedb");
        File.Copy(_sound.Path, path);
        Apply(path, "drop verdicts");
        var (code, output, error) = SampleStore.Cli("check", "night-7", "--store", path);
        Assert.Equal(ExitCodes.BadInput, code);
        Assert.DoesNotContain("no complete epoch yet", output, StringComparison.Ordinal);
        Assert.Contains("cannot be trusted", error, StringComparison.Ordinal);
    }

    // The store's own check; a damage refused on open (the format record) is its one problem.
    private static IReadOnlyList<string> Problems(string path)
    {
        try
        {
            using var store = RunStore.OpenForReading(path);
            return store.Verify();
        }
        catch (StoreException e)
        {
            return [e.Message];
        }
    }

    private static void Apply(string path, string damage)
    {
        using var database = new LiteDatabase($"Filename={path};Connection=direct");
        var epochs = database.GetCollection("epochs");
        var format = database.GetCollection("driftwatch");
        switch (damage)
        {
            case "drop verdicts" or "drop epochs" or "drop maps" or "drop statistics" or "drop layers":
                Assert.True(database.DropCollection(damage["drop ".Length..]));
                break;
            case "epoch run id":
                ChangeEpoch(epochs, d => d["RunId"] = 9);
                break;
            case "epoch run id and key":
                ChangeEpoch(epochs, d =>
                {
                    d["RunId"] = 9;
                    d["Key"] = "9/000002";
                });
                break;
            case "verdict gone":
                Assert.Equal(1, database.GetCollection("verdicts").DeleteMany(BsonExpression.Create("$.Key = '1/000003'")));
                break;
            case "map run id":
                var map = database.GetCollection("maps").FindOne(BsonExpression.Create("$.Epoch = 1"));
                map["RunId"] = 9;
                Assert.True(database.GetCollection("maps").Update(map));
                break;
            case "format version missing":
                var record = format.FindById("format");
                record.Remove("version");
                Assert.True(format.Update(record));
                break;
            case "format version null":
                Assert.True(format.Update(new BsonDocument { ["_id"] = "format", ["version"] = BsonValue.Null }));
                break;
            case "format version -1":
                Assert.True(format.Update(new BsonDocument { ["_id"] = "format", ["version"] = -1 }));
                break;
            default:
                throw new ArgumentOutOfRangeException(nameof(damage), damage, "no such damage");
        }
    }

    private static void ChangeEpoch(ILiteCollection<BsonDocument> epochs, Action<BsonDocument> change)
    {
        var epoch = epochs.FindOne(BsonExpression.Create("$.Epoch = 2"));
        change(epoch);
        Assert.True(epochs.Update(epoch));
    }
}
