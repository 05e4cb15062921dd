using System.Globalization;
using System.Text;
using DriftWatch.Attribution;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using LiteDB;
using Xunit;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Runs larger than a store can hold (100,000 features, 1,000,000 probe rows, a run name of over 1,000 bytes, a run
/// record over LiteDB's document limit) are refused when the monitor is built, with the limit in our words, and leave no
/// store file behind. Each check is computed from sizes, so these tests allocate no more than the options themselves.
/// </summary>
public sealed class SizeLimitTests
{
    [Fact]
    public void AHundredThousandFeaturesAreRefusedUpFrontAndNoStoreIsCreated()
    {
        using var temp = new TempFolder();
        const int Features = 100_000;
        var builder = FeatureSchema.CreateBuilder();
        for (int i = 0; i < Features; i++)
            builder.AddDense(string.Create(CultureInfo.InvariantCulture, $"f{i}"));
        var rows = new ProbeRows(new float[2 * Features], Features, [], 0, [0f, 1f]);
        string store = Path.Combine(temp.File("never"), "s.litedb");

        var refused = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(new MonitorOptions
        {
            StorePath = store,
            RunName = "wide",
            Schema = builder.Build(),
            Probe = new ProbeSet(rows, rows),
            Methods = [new IntegratedGradients(8)],
        }));

        // Before the limit, LiteDB's own "Document size exceed 16683050 limit" came out of the constructor, after the store file was made.
        Assert.Contains("the schema has 100,000 features; a run takes at most 20,000", refused.Message, StringComparison.Ordinal);
        Assert.DoesNotContain("Document size", refused.Message, StringComparison.Ordinal);
        Assert.False(Directory.Exists(temp.File("never")), "a store folder was created");
    }

    [Fact]
    public void AMillionProbeRowsAreRefusedUpFrontWithTheMostRowsThisSchemaTakes()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var half = new RowsBuilder().WithRows(500_000).WithSeed(3).Build();
        string store = temp.File("tall.litedb");

        var refused = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(new MonitorOptions
        {
            StorePath = store,
            RunName = "tall",
            Schema = model.Schema,
            Probe = new ProbeSet(half, half),
            Methods = [new IntegratedGradients(8)],
        }));

        // 4 features: a map of 1,000,000 rows is 16 MB of scores and 8 MB of per-row figures; the rows themselves 24 bytes each.
        long mostRows = (RunStore.MaximumMapBytes - RunStore.MapBytes(0, 4)) / ((4 * 4) + 8);
        Assert.Contains("the probe set has 1,000,000 rows × 4 features", refused.Message, StringComparison.Ordinal);
        Assert.Contains(string.Create(CultureInfo.InvariantCulture, $"use at most {mostRows:N0} probe rows with this schema"), refused.Message, StringComparison.Ordinal);
        Assert.Contains("the probe set's 1,000,000 rows take 24,000,000 bytes", refused.Message, StringComparison.Ordinal);
        Assert.False(File.Exists(store), "a store file was left behind");
    }

    [Theory]
    [InlineData(1_100, 'n')] // ASCII: 1,100 bytes
    [InlineData(300, 'ü')] // 2 bytes each in UTF-8: 600 bytes
    public void ARunNameOverTheLimitIsRefusedUpFront(int length, char letter)
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string store = temp.File("named.litedb");
        string name = new(letter, length);
        int bytes = Encoding.UTF8.GetByteCount(name);

        var refused = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(store, model, name)));

        // Before the limit, LiteDB said "Index key must be less than 1023 bytes" (only past ~1,000 bytes), after creating the store.
        Assert.Contains(string.Create(CultureInfo.InvariantCulture, $"RunName is {bytes:N0} bytes in UTF-8; a store takes run names of at most 512 bytes"), refused.Message, StringComparison.Ordinal);
        Assert.False(File.Exists(store), "a store file was left behind");
    }

    [Theory]
    [InlineData("n", 512)]
    [InlineData("🌱", 128)] // 4 bytes each in UTF-8
    public void ARunNameAtTheLimitIsStoredAndFound(string letter, int count)
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string store = temp.File("named.litedb");
        string name = string.Concat(Enumerable.Repeat(letter, count));
        Assert.Equal(RunStore.MaximumRunNameBytes, Encoding.UTF8.GetByteCount(name));
        using (var monitor = new TrainingMonitor(Options(store, model, name)))
            monitor.EndEpoch(model, 1, new EpochMetrics(0.7, 0.7));
        using var reader = RunStore.OpenForReading(store);
        Assert.Equal([1], reader.StoredEpochs(name).Select(e => e.Epoch));
    }

    [Fact]
    public void ARunRecordOverTheDocumentLimitIsRefusedBeforeAStoreIsOpened()
    {
        using var temp = new TempFolder();
        // 1,000 features within every count limit, but names of 17,000 characters: a run record of about 17 MB.
        var builder = FeatureSchema.CreateBuilder();
        for (int i = 0; i < 1_000; i++)
            builder.AddDense(string.Create(CultureInfo.InvariantCulture, $"{i:D5}") + new string('x', 17_000));
        var rows = new ProbeRows(new float[2 * 1_000], 1_000, [], 0, [0f, 1f]);
        string store = temp.File("long-names.litedb");

        var refused = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(new MonitorOptions
        {
            StorePath = store,
            RunName = "long-names",
            Schema = builder.Build(),
            Probe = new ProbeSet(rows, rows),
            Methods = [new IntegratedGradients(8)],
        }));

        Assert.Contains("the run's record (schema, probe rows, value counts) would take 17,", refused.Message, StringComparison.Ordinal);
        Assert.Contains("at most 16,000,000 bytes", refused.Message, StringComparison.Ordinal);
        Assert.False(File.Exists(store), "a store file was left behind");
    }

    [Theory]
    [InlineData(300, 200)]
    [InlineData(64, 13)]
    [InlineData(20, 20_000)]
    public void TheMapSizeTheLimitIsCheckedAgainstIsAnUpperBoundOfTheStoredDocument(int rows, int features)
    {
        var half = new ImportanceDocument
        {
            MeanAbsolute = new double[features],
            MeanSigned = new double[features],
            Share = new double[features],
            Alignment = new double[features],
        };
        var map = new MapDocument
        {
            Key = "12345/000001/integrated-gradients/logit",
            RunId = 12345,
            Epoch = 1,
            Method = "integrated-gradients",
            Target = "logit",
            Rows = rows,
            Features = features,
            Scores = new byte[4L * rows * features],
            Deltas = new byte[4 * rows],
            OutputGaps = new byte[4 * rows],
            HeldOut = half,
            Training = half,
            Settings = new Dictionary<string, string> { ["steps"] = "64", ["rule"] = "midpoint", ["chunkRows"] = "2048" },
        };
        long stored = BsonSerializer.Serialize(new BsonMapper().ToDocument(map)).Length;
        long estimate = RunStore.MapBytes(rows, features);
        Assert.True(stored <= estimate, $"stored {stored} bytes, estimated {estimate}");
        Assert.True(estimate <= (stored * 1.15) + 4096, $"stored {stored} bytes, estimated {estimate}: the limit would refuse maps that fit");
    }

    private static MonitorOptions Options(string store, SmallNet model, string run) => new()
    {
        StorePath = store,
        RunName = run,
        Schema = model.Schema,
        Probe = TestProbes.Small(),
        Methods = [new IntegratedGradients(8)],
    };
}
