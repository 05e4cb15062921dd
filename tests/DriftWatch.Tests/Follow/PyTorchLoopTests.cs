using System.Globalization;
using System.Text.Json;
using DriftWatch.Cli;
using DriftWatch.Model;
using DriftWatch.Storage;
using TorchSharp;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Follow;

/// <summary>
/// The PyTorch path end to end: loops written from docs/pytorch.md (loop_from_docs.py) with Debian's python3-torch, the
/// verdict coming back to the loop, follow recording every epoch, waiting for a folder, dense-only and categorical-only
/// models, and reattribute on TorchScript runs.
/// </summary>
public sealed class PyTorchLoopTests : IClassFixture<PythonRunFixture>
{
    private const int Epochs = 12;

    private readonly PythonRunFixture _run;
    private readonly ITestOutputHelper _log;

    public PyTorchLoopTests(PythonRunFixture run, ITestOutputHelper log)
    {
        _run = run;
        _log = log;
    }

    [Fact]
    public void ALoopFromTheDocsBreaksOnTheVerdictOfTheEpochItJustFinished()
    {
        if (!Available())
            return;
        string folder = Path.Combine(_run.Root, "live-" + Guid.NewGuid().ToString("N")[..8]);
        string store = NewStore();
        var buffer = new StringWriter();
        var output = TextWriter.Synchronized(buffer);
        var error = TextWriter.Synchronized(new StringWriter());
        int followCode = -1;
        // follow starts before the loop has created the folder, and waits for it.
        var follow = new Thread(() => followCode = CliApp.Run(["follow", folder, "--store", store, "--poll-seconds", "1"], output, error));
        follow.Start();
        string Written()
        {
            lock (output) // the synchronised writer locks itself around each write
                return buffer.ToString();
        }
        while (!Written().Contains("waiting up to 600 s", StringComparison.Ordinal) && follow.IsAlive)
            Thread.Sleep(50);
        Assert.False(Directory.Exists(folder));

        var (code, loop) = Loop(folder, "overfit", verdictTimeout: 600);
        follow.Join();

        _log.WriteLine(loop);
        Assert.True(code == 0, loop);
        var stop = System.Text.RegularExpressions.Regex.Match(loop, @"(?m)^stopped at (\d+)$");
        Assert.True(stop.Success, "the loop never heard a Halt; the check would say nothing: " + loop);
        int stoppedAt = int.Parse(stop.Groups[1].Value, CultureInfo.InvariantCulture);
        Assert.True(stoppedAt < Epochs, loop);
        // The verdict the loop broke on is the one of the epoch it had just finished (docs/pytorch.md: the same epoch).
        Assert.Equal("Halt", VerdictIn(folder, stoppedAt));
        Assert.All(Enumerable.Range(1, stoppedAt - 1), e => Assert.NotEqual("Halt", VerdictIn(folder, e)));
        Assert.False(File.Exists(Path.Combine(folder, SnapshotFile(stoppedAt + 1))));
        Assert.Equal(ExitCodes.Halt, followCode);
        Assert.Contains($"Halt advised at epoch {stoppedAt}", Written(), StringComparison.Ordinal);
        using var reading = RunStore.OpenForReading(store);
        var run = reading.GetRun(Path.GetFileName(folder));
        Assert.Equal(Enumerable.Range(1, stoppedAt), reading.Epochs(run.Id).Select(e => e.Epoch));
        // What the loop printed per epoch is what the store holds.
        foreach (var verdict in reading.Verdicts(run.Id))
            Assert.Matches($"(?m)^epoch {verdict.Epoch} {verdict.Kind} ", loop);
    }

    [Fact]
    public void FollowOnceRecordsEveryEpochPastAHaltAndAVerdictWaitThatRunsOutLosesNothing()
    {
        if (!Available())
            return;
        string folder = Path.Combine(_run.Root, "finished-" + Guid.NewGuid().ToString("N")[..8]);
        // No follow runs beside this loop: every wait for a verdict runs out; the loop goes on and writes every epoch.
        var (code, loop) = Loop(folder, "overfit", verdictTimeout: 0);
        Assert.True(code == 0, loop);
        Assert.Contains("finished", loop, StringComparison.Ordinal);
        var timeouts = loop.Split('\n').Where(l => l.StartsWith("driftwatch_follow: no verdict for epoch", StringComparison.Ordinal)).ToList();
        Assert.Equal(Epochs, timeouts.Count); // one line per epoch, nothing raised into the loop
        Assert.Contains("no verdict for epoch 3 within 0 s", timeouts[2], StringComparison.Ordinal);
        string store = NewStore(), stopping = NewStore();

        var once = Follow(folder, "--store", store, "--once");
        var stopped = Follow(folder, "--store", stopping, "--once", "--stop-on-halt");

        using var reading = RunStore.OpenForReading(store);
        var run = reading.GetRun(Path.GetFileName(folder));
        Assert.Equal(Enumerable.Range(1, Epochs), reading.Epochs(run.Id).Select(e => e.Epoch));
        var halts = reading.Verdicts(run.Id).Where(v => v.Kind == "Halt").Select(v => v.Epoch).ToList();
        Assert.NotEmpty(halts);
        Assert.True(halts[0] < Epochs, "the first Halt is at the last epoch; the check would say nothing");
        Assert.Equal(ExitCodes.Halt, once.Code);
        Assert.Contains($"done: {Epochs} epochs recorded in this call", once.Output, StringComparison.Ordinal);
        Assert.All(Enumerable.Range(1, Epochs), e => Assert.True(File.Exists(Path.Combine(folder, VerdictFile(e)))));
        Assert.Equal("Halt", VerdictIn(folder, halts[0]));

        // Following again stores nothing new, writes back a verdict file that went missing, and still reports the run's Halts.
        File.Delete(Path.Combine(folder, VerdictFile(3)));
        var again = Follow(folder, "--store", store, "--once");
        Assert.Equal(ExitCodes.Halt, again.Code);
        Assert.Contains("done: 0 epochs recorded in this call", again.Output, StringComparison.Ordinal);
        Assert.Equal(reading.Verdicts(run.Id).Single(v => v.Epoch == 3).Kind, VerdictIn(folder, 3));

        Assert.Equal(ExitCodes.Halt, stopped.Code);
        using var stoppedReading = RunStore.OpenForReading(stopping);
        Assert.Equal(Enumerable.Range(1, halts[0]), stoppedReading.Epochs(stoppedReading.GetRun(Path.GetFileName(folder)).Id).Select(e => e.Epoch));
    }

    [Fact]
    public void FollowGivesUpOnAFolderThatNeverAppearsWithOneLine()
    {
        if (!Available())
            return;
        string missing = Path.Combine(_run.Root, "never-" + Guid.NewGuid().ToString("N")[..8]);
        string store = NewStore();

        var waited = Follow(missing, "--store", store, "--wait-seconds", "1", "--poll-seconds", "1");
        var once = Follow(missing, "--store", store, "--once");

        Assert.Equal(ExitCodes.BadInput, waited.Code);
        Assert.Contains("does not exist after waiting 1 s", waited.Error, StringComparison.Ordinal);
        Assert.Single(waited.Error.Trim().Split('\n'));
        Assert.Equal(ExitCodes.BadInput, once.Code);
        Assert.Contains("does not exist", once.Error, StringComparison.Ordinal);
        Assert.DoesNotContain("waiting", once.Output, StringComparison.Ordinal); // --once never waits
        Assert.False(File.Exists(store));
    }

    [Theory]
    [InlineData("dense-only", 4)]
    [InlineData("categorical-only", 1)]
    public void ModelsWithOnlyDenseOrOnlyCategoricalInputsArePassedWithNone(string mode, int features)
    {
        if (!Available())
            return;
        string folder = Path.Combine(_run.Root, mode + "-" + Guid.NewGuid().ToString("N")[..8]);
        var (code, loop) = Loop(folder, mode, verdictTimeout: 0, epochs: 3);
        Assert.True(code == 0, loop);
        string store = NewStore();

        var followed = Follow(folder, "--store", store, "--once");

        Assert.True(followed.Code is ExitCodes.Fine or ExitCodes.Halt, followed.Output + followed.Error);
        using var reading = RunStore.OpenForReading(store);
        var run = reading.GetRun(Path.GetFileName(folder));
        Assert.Equal(mode == "dense-only" ? 4 : 0, run.DenseCount);
        Assert.Equal(mode == "dense-only" ? 0 : 1, run.CategoricalCount);
        var maps = reading.Maps(run.Id, "integrated-gradients");
        Assert.Equal(3, maps.Count);
        Assert.All(maps, m => Assert.Equal(features, m.Features));
        AssertComplete(reading, run, folder, "integrated-gradients");
    }

    [Fact]
    public void ReattributeRecomputesATorchScriptRunFromItsRunFolder()
    {
        if (!Available())
            return;
        string store = NewStore();
        Assert.Equal(ExitCodes.Fine, Follow(_run.Folder, "--store", store, "--once").Code);

        var fine = Cli("reattribute", "greenhouse-py", "--method", "integrated-gradients", "--setting", "steps=128", "--store", store);
        var same = Cli("reattribute", "greenhouse-py", "--method", "integrated-gradients", "--as", "ig-64", "--epochs", PythonRunFixture.ReferenceEpoch.ToString(CultureInfo.InvariantCulture), "--store", store);

        Assert.True(fine.Code == ExitCodes.Fine, fine.Output + fine.Error);
        Assert.Contains("TorchScript snapshot in run folder", fine.Output, StringComparison.Ordinal);
        Assert.True(same.Code == ExitCodes.Fine, same.Output + same.Error);
        using var reading = RunStore.OpenForReading(store);
        var run = reading.GetRun("greenhouse-py");
        Assert.Equal(PythonRunFixture.Epochs, reading.Maps(run.Id, "re-integrated-gradients").Count);
        AssertComplete(reading, run, _run.Folder, "re-integrated-gradients");

        // The reference is PyTorch's own Integrated Gradients of the eager model at that epoch (train_small_run.py:
        // torch.autograd, midpoint rule, 64 steps, zero baseline; Sundararajan, Taly, Yan 2017, eq. 3).
        var map = reading.Maps(run.Id, "ig-64").Single();
        var scores = FloatBytes.ToFloats(map.Scores);
        double worst = _run.WorstDifferenceFromPyTorch(scores, map.Rows, map.Features);
        _log.WriteLine($"re-attributed from the TorchScript file against PyTorch: largest difference {worst:G4}");
        Assert.True(worst <= 1e-4, $"largest difference from PyTorch's attributions: {worst:G4}");
    }

    [Fact]
    public void AMovedRunFolderIsNamedWithOneLineAndFoundWithRunFolder()
    {
        if (!Available())
            return;
        string original = _run.CopyFolder("moving-" + Guid.NewGuid().ToString("N")[..8]);
        string store = NewStore();
        Assert.Equal(ExitCodes.Fine, Follow(original, "--store", store, "--once", "--run", "moved").Code);
        string moved = original + "-elsewhere";
        Directory.Move(original, moved);

        var lost = Cli("reattribute", "moved", "--method", "gradient-x-input", "--store", store);
        var found = Cli("reattribute", "moved", "--method", "gradient-x-input", "--store", store, "--run-folder", moved);
        var neurons = Cli("neurons", "moved", "--store", store, "--no-chart");

        Assert.Equal(ExitCodes.BadInput, lost.Code);
        Assert.Contains("which is not there any more", lost.Error, StringComparison.Ordinal);
        Assert.Contains("--run-folder", lost.Error, StringComparison.Ordinal);
        Assert.Single(lost.Error.Trim().Split('\n'));
        Assert.True(found.Code == ExitCodes.Fine, found.Output + found.Error);
        Assert.Equal(ExitCodes.BadInput, neurons.Code);
        Assert.Contains("Python run folder", neurons.Error, StringComparison.Ordinal);
        foreach (string message in new[] { lost.Error, neurons.Error })
            Assert.DoesNotContain("MonitorOptions", message, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("newer-helper", "written by a newer driftwatch_follow.py (run-folder contract 3); this driftwatch reads contracts up to 2")]
    [InlineData("no-probe", "has no probe.csv")]
    public void AFolderItCannotReadGetsOneLineAndNothingStored(string damage, string expected)
    {
        if (!Available())
            return;
        string folder = _run.CopyFolder(damage + "-" + Guid.NewGuid().ToString("N")[..8]);
        if (damage == "no-probe")
        {
            File.Delete(Path.Combine(folder, "probe.csv"));
        }
        else
        {
            string schema = Path.Combine(folder, "schema.json");
            string text = File.ReadAllText(schema);
            Assert.Contains("\"contract\": 2", text, StringComparison.Ordinal);
            File.WriteAllText(schema, text.Replace("\"contract\": 2", "\"contract\": 3", StringComparison.Ordinal));
        }
        string store = NewStore();

        var (code, _, error) = Follow(folder, "--store", store, "--once");

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Contains(expected, error, StringComparison.Ordinal);
        Assert.Single(error.Trim().Split('\n'));
        Assert.False(File.Exists(store));
        Assert.False(File.Exists(Path.Combine(folder, VerdictFile(1))));
    }

    // Sundararajan, Taly, Yan 2017, Prop. 1 (completeness): each row's attributions sum to F(x) − F(x′), with F the
    // TorchScript file itself loaded through TorchSharp outside the attribution code; within 1% at these step counts.
    private void AssertComplete(RunStore reading, RunDocument run, string folder, string method)
    {
        var schema = FeatureSchema.FromDefinitions(run.Features.Select(f => new FeatureDefinition(f.Name, Enum.Parse<FeatureKind>(f.Kind), f.FirstColumn, f.ColumnCount)));
        int rows = run.HeldOutRows + run.TrainingRows;
        var dense = FloatBytes.ToFloats(run.ProbeDense);
        var categorical = FloatBytes.ToLongs(run.ProbeCategorical);
        foreach (var map in reading.Maps(run.Id, method))
        {
            double[] gaps;
            using (var model = TorchScriptModel.Load(Path.Combine(folder, SnapshotFile(map.Epoch)), schema))
            using (var scope = torch.NewDisposeScope())
            using (torch.no_grad())
            {
                var x = model.Encode(torch.tensor(dense, [rows, run.DenseCount]), torch.tensor(categorical, [rows, run.CategoricalCount]));
                var gap = model.Score(x).select(1, 0) - model.Score(torch.zeros_like(x)).select(1, 0);
                gaps = gap.to_type(torch.ScalarType.Float64).data<double>().ToArray();
            }
            var scores = FloatBytes.ToFloats(map.Scores);
            double meanGap = gaps.Average(Math.Abs);
            double meanError = Enumerable.Range(0, rows)
                .Average(r => Math.Abs(Enumerable.Range(0, map.Features).Sum(f => (double)scores[r * map.Features + f]) - gaps[r]));
            _log.WriteLine($"{method}, epoch {map.Epoch}: mean completeness gap {meanError:G4}, mean |F(x) − F(x′)| {meanGap:G4}");
            Assert.True(meanError <= 0.01 * meanGap, $"epoch {map.Epoch}: mean completeness gap {meanError:G4} against mean |F(x) − F(x′)| {meanGap:G4}");
            Assert.True(meanGap > 0.05, $"epoch {map.Epoch}: the model's outputs hardly move ({meanGap:G4}); the check would be empty");
        }
    }

    // The file names docs/pytorch.md gives.
    private static string SnapshotFile(int epoch) => string.Create(CultureInfo.InvariantCulture, $"epoch-{epoch:D4}.pt");

    private static string VerdictFile(int epoch) => string.Create(CultureInfo.InvariantCulture, $"verdict-{epoch:D4}.json");

    private static string VerdictIn(string folder, int epoch)
    {
        using var document = JsonDocument.Parse(File.ReadAllText(Path.Combine(folder, VerdictFile(epoch))));
        Assert.Equal(epoch, document.RootElement.GetProperty("epoch").GetInt32());
        return document.RootElement.GetProperty("verdict").GetString()!;
    }

    private (int Code, string Output) Loop(string folder, string mode, double verdictTimeout, int epochs = Epochs)
    {
        string repository = ConventionTests.FindRepositoryRoot();
        return PythonRunFixture.RunProcess(
            PythonRunFixture.Python,
            Path.Combine(repository, "tests", "DriftWatch.Tests", "Follow", "loop_from_docs.py"),
            Path.Combine(repository, "hooks"),
            folder,
            mode,
            epochs.ToString(CultureInfo.InvariantCulture),
            verdictTimeout.ToString(CultureInfo.InvariantCulture));
    }

    private bool Available() => _run.Available(_log);

    private string NewStore() => _run.NewStore();

    private static (int Code, string Output, string Error) Follow(params string[] arguments) => Cli(["follow", .. arguments]);

    private static (int Code, string Output, string Error) Cli(params string[] arguments)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(arguments, output, error);
        return (code, output.ToString(), error.ToString());
    }
}
