using DriftWatch.Demo;
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
