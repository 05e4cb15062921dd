using DriftWatch.Demo.Evaluation;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Sharding;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Sharding;

/// <summary>
/// The detector evaluation split into shards (blocks of scenario × seed runs) and merged gives the same runs.csv as the
/// evaluation run in one piece. Our own invariant: every run is seeded by its scenario and seed alone.
/// </summary>
public sealed class EvaluationShardTests
{
    // Small on purpose: three runs of two epochs (the fewest evaluate takes) with a 16 + 16 probe.
    private static EvaluationOptions Small(string folder) => new()
    {
        Scenarios = [GreenhouseVariant.LeakOnly],
        Seeds = [0, 1, 2],
        Epochs = 2,
        Steps = 8,
        ProbePerHalf = 16,
        OutputFolder = folder,
    };

    // runs.csv without its last column, the wall-clock seconds of each run.
    private static List<string> RunsWithoutSeconds(string folder) =>
        [.. File.ReadAllLines(Path.Combine(folder, "runs.csv")).Select(line => line[..line.LastIndexOf(',')])];

    [Fact]
    public void ShardsMergedGiveTheSameTablesAsOneEvaluationAndAMissingShardIsNamed()
    {
        using var temp = new TempFolder();
        string whole = temp.File("whole"), split = temp.File("split");
        DetectorEvaluation.Run(Small(whole), TextWriter.Null);
        for (int k = 0; k < 3; k++)
            DetectorEvaluation.Run(Small(split) with { Shard = new Shard(k, 3) }, TextWriter.Null);
        File.Move(Path.Combine(split, "shard-1-of-3", EvaluationShards.ResultsFile), temp.File("kept.json"));

        var missing = Assert.Throws<DriftWatchException>(() => DetectorEvaluation.Run(Small(split) with { MergeShards = true }, TextWriter.Null));
        bool wroteWhileMissing = File.Exists(Path.Combine(split, "runs.csv"));
        File.Move(temp.File("kept.json"), Path.Combine(split, "shard-1-of-3", EvaluationShards.ResultsFile));
        var output = new StringWriter();
        var merged = DetectorEvaluation.Run(new EvaluationOptions { OutputFolder = split, MergeShards = true }, output);

        Assert.Equal("1 of 3 shards have no results in '" + split + "': shard-1-of-3 (leak seed 1); run evaluate --shard K/3 again for each with the same settings, then merge again; nothing was written", missing.Message);
        Assert.False(wroteWhileMissing);
        Assert.Equal(3, merged.Count);
        Assert.Contains("merged 3 evaluation shards", output.ToString());
        Assert.Equal(4, RunsWithoutSeconds(whole).Count);
        Assert.Equal(RunsWithoutSeconds(whole), RunsWithoutSeconds(split));
        Assert.Equal(File.ReadAllText(Path.Combine(whole, "summary.csv")), File.ReadAllText(Path.Combine(split, "summary.csv")));
    }

    [Fact]
    public void ShardsRunWithOtherSettingsOrAnotherSplitAreRefused()
    {
        using var temp = new TempFolder();
        string folder = temp.File("split");
        // One run in two shards: shard 0 is empty, so only shard 1 trains.
        var tiny = Small(folder) with { Scenarios = [GreenhouseVariant.Clean], Seeds = [0], Epochs = 3 };
        DetectorEvaluation.Run(tiny with { Shard = new Shard(0, 2) }, TextWriter.Null);
        DetectorEvaluation.Run(tiny with { Shard = new Shard(1, 2), Epochs = 2 }, TextWriter.Null);

        var settings = Assert.Throws<DriftWatchException>(() => DetectorEvaluation.Run(tiny with { MergeShards = true }, TextWriter.Null));
        Directory.CreateDirectory(Path.Combine(folder, "shard-0-of-3"));
        var split = Assert.Throws<DriftWatchException>(() => DetectorEvaluation.Run(tiny with { MergeShards = true }, TextWriter.Null));
        var none = Assert.Throws<DriftWatchException>(() => DetectorEvaluation.Run(tiny with { OutputFolder = temp.File("empty"), MergeShards = true }, TextWriter.Null));
        var both = Assert.Throws<DriftWatchException>(() => EvaluationOptions.Parse(["--shard", "0/2", "--merge-shards"]));

        Assert.Equal("shard-1-of-2 was run with other settings than shard-0-of-2 (2 epochs, not 3); run every shard with the same settings; nothing was written", settings.Message);
        Assert.Contains("holds shards of 2 and of 3; keep the folders of one split only", split.Message);
        Assert.Contains("no shard folders (shard-K-of-N)", none.Message);
        Assert.Contains("give one of them", both.Message);
        Assert.False(File.Exists(Path.Combine(folder, "runs.csv")));
    }
}
