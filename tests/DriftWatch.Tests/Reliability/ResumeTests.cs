using DriftWatch.Attribution;
using DriftWatch.Demo;
using DriftWatch.Hooks;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Reliability;

/// <summary>A demo run stopped and resumed with <c>--resume</c> stores exactly what a run that never stopped stores.</summary>
public sealed class ResumeTests
{
    [Fact]
    public void AResumedDemoRunStoresWhatAnUninterruptedRunStores()
    {
        using var temp = new TempFolder();
        string[] common = ["--small", "--rows", "200", "--steps", "16", "--seed", "2", "--keep-training"];
        Run([.. common, "--store", temp.File("whole.litedb"), "--run", "whole", "--epochs", "5"]);
        Run([.. common, "--store", temp.File("parts.litedb"), "--run", "parts", "--epochs", "2"]);
        string resumed = Run([.. common, "--store", temp.File("parts.litedb"), "--run", "parts", "--epochs", "5", "--resume"]);

        Assert.Contains("resumed   run 'parts' from epoch 2: weights from its snapshot, optimizer state from", resumed);
        Assert.Matches(@"(?m)^epoch\s+3\s", resumed);
        Assert.DoesNotMatch(@"(?m)^epoch\s+[12]\s", resumed);
        var (wholeEpochs, wholeMaps, wholeVerdicts) = Read(temp.File("whole.litedb"), "whole");
        var (partEpochs, partMaps, partVerdicts) = Read(temp.File("parts.litedb"), "parts");
        Assert.Equal([1, 2, 3, 4, 5], partEpochs.Select(e => e.Epoch));
        for (int i = 0; i < wholeEpochs.Count; i++)
        {
            Assert.Equal(wholeEpochs[i].Metrics.OrderBy(m => m.Key, StringComparer.Ordinal), partEpochs[i].Metrics.OrderBy(m => m.Key, StringComparer.Ordinal));
            Assert.Equal(wholeMaps[i].Scores, partMaps[i].Scores);
            Assert.Equal(wholeVerdicts[i].Kind, partVerdicts[i].Kind);
            Assert.Equal(wholeVerdicts[i].Reasons, partVerdicts[i].Reasons);
        }
    }

    [Fact]
    public void ResumingARunThatIsNotThereStartsItAndReusingANameWithoutResumeIsRefused()
    {
        using var temp = new TempFolder();
        string[] args = ["--small", "--rows", "100", "--steps", "8", "--store", temp.File("s.litedb"), "--run", "fresh", "--epochs", "1"];

        string output = Run([.. args, "--resume"]);
        byte[] before = File.ReadAllBytes(temp.File("s.litedb"));
        var refused = Assert.Throws<DriftWatchException>(() => GreenhouseTraining.Run(DemoOptions.Parse(args), new StringWriter()));

        Assert.Contains("has no complete epoch yet; it starts at epoch 1", output);
        Assert.Contains("pass --resume to continue it", refused.Message);
        Assert.Equal(before, File.ReadAllBytes(temp.File("s.litedb")));
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void AnEpochRedoneAfterAKillDuringItsSnapshotUploadStoresAWholeSnapshot(bool fileRecordLeft)
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        var probe = TestProbes.Small();
        var options = new MonitorOptions { StorePath = store, RunName = "r", Schema = model.Schema, Probe = probe, Methods = [new IntegratedGradients(8)] };
        int runId;
        using (var first = new TrainingMonitor(options))
        {
            first.EndEpoch(model, 0, new EpochMetrics(0.7, 0.7));
            runId = first.Run.Id;
        }
        // What a kill in the middle of uploading epoch 1's snapshot leaves: LiteDB's file record, still of length 0
        // (it is completed when the upload closes), and the first chunk.
        string id = $"snapshots/{runId}/000001";
        using (var raw = new LiteDB.LiteDatabase(new LiteDB.ConnectionString { Filename = store, Connection = LiteDB.ConnectionType.Shared }))
        {
            if (fileRecordLeft)
            {
                raw.GetCollection("_files").Insert(new LiteDB.BsonDocument
                {
                    ["_id"] = id,
                    ["filename"] = "run1-epoch1.weights",
                    ["mimeType"] = "application/octet-stream",
                    ["length"] = 0L,
                    ["chunks"] = 0,
                    ["uploadDate"] = DateTime.UtcNow,
                    ["metadata"] = new LiteDB.BsonDocument(),
                });
            }
            raw.GetCollection("_chunks").Insert(new LiteDB.BsonDocument
            {
                ["_id"] = new LiteDB.BsonDocument { ["f"] = id, ["n"] = 0 },
                ["data"] = new byte[1000],
            });
        }

        using var resumed = new TrainingMonitor(options with { Resume = true });
        var verdict = resumed.EndEpoch(model, 1, new EpochMetrics(0.6, 0.7));

        Assert.DoesNotContain(verdict.Findings, f => f.Kind == DriftWatch.Detection.FindingKind.MonitoringFailure);
        var epoch = resumed.Store.Epochs(runId).Single(e => e.Epoch == 1);
        Assert.Equal(id, epoch.SnapshotId);
        using var restored = new SmallNet(3, 5, 4, seed: 9);
        using (var weights = resumed.Store.ReadSnapshot(id))
            restored.load(weights);
        Assert.Equal(model.parameters().Select(p => p.data<float>().ToArray()).SelectMany(x => x), restored.parameters().Select(p => p.data<float>().ToArray()).SelectMany(x => x));
    }

    private static string Run(string[] args)
    {
        var output = new StringWriter();
        Assert.Equal(0, GreenhouseTraining.Run(DemoOptions.Parse(args), output));
        return output.ToString();
    }

    private static (IReadOnlyList<EpochDocument> Epochs, IReadOnlyList<MapDocument> Maps, IReadOnlyList<VerdictDocument> Verdicts) Read(string path, string run)
    {
        using var store = RunStore.OpenForReading(path);
        int id = store.GetRun(run).Id;
        return (store.Epochs(id), store.Maps(id), store.Verdicts(id));
    }
}
