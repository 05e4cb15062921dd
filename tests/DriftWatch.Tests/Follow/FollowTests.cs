using System.Diagnostics;
using System.Globalization;
using System.Security.Cryptography;
using DriftWatch.Cli;
using DriftWatch.Model;
using DriftWatch.Storage;
using TorchSharp;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Follow;

/// <summary>
/// A tiny seeded Python training run written with hooks/driftwatch_follow.py by Debian's python3-torch, and the
/// reference attribution PyTorch computed for it; generated once for the tests below.
/// </summary>
/// <remarks>
/// Needs <c>/usr/bin/python3</c> with torch (<c>apt-get install python3-torch</c>; CI installs it). When it is missing
/// the tests fail if <c>CI</c> is set and otherwise return early with a message, since xunit 2.9 cannot skip at run time.
/// </remarks>
public sealed class PythonRunFixture : IDisposable
{
    /// <summary>The epochs the Python run trains.</summary>
    public const int Epochs = 4;

    /// <summary>The epoch whose attributions PyTorch also computes.</summary>
    public const int ReferenceEpoch = 2;

    /// <summary>Integrated Gradients steps, the same as the monitor's default.</summary>
    public const int Steps = 64;

    public const string Python = "/usr/bin/python3";

    public PythonRunFixture()
    {
        Root = Path.Combine(Path.GetTempPath(), "driftwatch-follow-" + Guid.NewGuid().ToString("N")[..12]);
        Directory.CreateDirectory(Root);
        if (!PythonHasTorch())
        {
            Unavailable = $"{Python} with torch is not installed (apt-get install -y python3-torch)";
            return;
        }
        string repository = ConventionTests.FindRepositoryRoot();
        string script = Path.Combine(Root, "train_small_run.py");
        File.Copy(Path.Combine(repository, "tests", "DriftWatch.Tests", "Follow", "train_small_run.py"), script);
        var (code, output) = RunProcess(Python, script, Path.Combine(repository, "hooks"), Folder,
            ReferenceEpoch.ToString(CultureInfo.InvariantCulture), Steps.ToString(CultureInfo.InvariantCulture),
            Epochs.ToString(CultureInfo.InvariantCulture), ReferencePath);
        if (code != 0)
            throw new InvalidOperationException($"the Python training run failed ({code}): {output}");
    }

    public string Root { get; }

    public string Folder => Path.Combine(Root, "greenhouse-py");

    public string ReferencePath => Path.Combine(Root, "reference.csv");

    /// <summary>Whether Python with torch is here; CI must have it (it fails there), elsewhere the test says why it did not run.</summary>
    public bool Available(ITestOutputHelper log)
    {
        if (Unavailable is null)
            return true;
        if (Environment.GetEnvironmentVariable("CI") is { Length: > 0 })
            Assert.Fail($"CI must run the PyTorch and follow tests: {Unavailable}");
        log.WriteLine($"not run: {Unavailable}; CI installs it (.ci/run)");
        return false;
    }

    /// <summary>A fresh store path in the fixture's folder.</summary>
    public string NewStore() => Path.Combine(Root, Guid.NewGuid().ToString("N")[..12] + ".litedb");

    /// <summary>
    /// The largest difference between <paramref name="scores"/> (rows × features) and PyTorch's own Integrated Gradients of
    /// the eager model at <see cref="ReferenceEpoch"/> (train_small_run.py: torch.autograd, midpoint rule, 64 steps, zero
    /// baseline; Sundararajan, Taly, Yan 2017, eq. 3), after checking the shapes agree and the reference is not all near zero.
    /// </summary>
    public double WorstDifferenceFromPyTorch(float[] scores, int rows, int features)
    {
        var reference = File.ReadAllLines(ReferencePath)
            .Select(l => l.Split(',').Select(v => double.Parse(v, CultureInfo.InvariantCulture)).ToArray()).ToArray();
        Assert.Equal(rows, reference.Length);
        Assert.Equal(features, reference[0].Length);
        Assert.True(reference.SelectMany(r => r).Max(Math.Abs) > 0.1, "the reference attributions are all near zero; the check would be empty");
        double worst = 0;
        for (int r = 0; r < rows; r++)
        {
            for (int f = 0; f < features; f++)
                worst = Math.Max(worst, Math.Abs(scores[r * features + f] - reference[r][f]));
        }
        return worst;
    }

    /// <summary>Why the run could not be generated, or null.</summary>
    public string? Unavailable { get; }

    /// <summary>A copy of the run folder to damage.</summary>
    public string CopyFolder(string name)
    {
        string copy = Path.Combine(Root, name);
        Directory.CreateDirectory(copy);
        foreach (string file in Directory.GetFiles(Folder))
            File.Copy(file, Path.Combine(copy, Path.GetFileName(file)));
        return copy;
    }

    public void Dispose()
    {
        try
        {
            Directory.Delete(Root, recursive: true);
        }
        catch (IOException)
        {
            // A temp folder left behind is harmless.
        }
    }

    private static bool PythonHasTorch() =>
        File.Exists(Python) && RunProcess(Python, "-c", "import torch").Code == 0;

    /// <summary>Runs a program to its end; its exit code and its standard output followed by its standard error.</summary>
    internal static (int Code, string Output) RunProcess(string program, params string[] arguments)
    {
        var start = new ProcessStartInfo(program) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        foreach (string argument in arguments)
            start.ArgumentList.Add(argument);
        using var process = Process.Start(start)!;
        var error = process.StandardError.ReadToEndAsync();
        string output = process.StandardOutput.ReadToEnd();
        process.WaitForExit();
        return (process.ExitCode, output + error.Result);
    }
}

public sealed class FollowTests : IClassFixture<PythonRunFixture>
{
    private readonly PythonRunFixture _run;
    private readonly ITestOutputHelper _log;

    public FollowTests(PythonRunFixture run, ITestOutputHelper log)
    {
        _run = run;
        _log = log;
    }

    [Fact]
    public void FollowOnceStoresEveryEpochOfThePythonRun()
    {
        if (!Available())
            return;
        string store = NewStore();

        var (code, output, error) = Follow(_run.Folder, "--store", store, "--once");

        Assert.True(code == ExitCodes.Fine, output + error);
        using var reading = RunStore.OpenForReading(store);
        var run = reading.GetRun("greenhouse-py");
        Assert.Equal([1, 2, 3, 4], reading.Epochs(run.Id).Select(e => e.Epoch));
        Assert.Equal(4, reading.Maps(run.Id, "integrated-gradients").Count);
        Assert.Equal(4, reading.Verdicts(run.Id).Count);
        Assert.Matches(@"(?m)^epoch 4  (Continue|Caution|Halt)", output);
        // The metrics line's loss is the one the Python loop computed (metrics.jsonl, epoch 1).
        double trainLoss = reading.Epochs(run.Id)[0].Metrics[MetricKeys.TrainLoss];
        string firstLine = File.ReadLines(Path.Combine(_run.Folder, "metrics.jsonl")).First();
        Assert.Contains(trainLoss.ToString("R", CultureInfo.InvariantCulture), firstLine);
    }

    [Fact]
    public void WeightsWritesAFollowedRunsTorchScriptFileOfTheChosenEpoch()
    {
        if (!Available())
            return;
        string store = NewStore();
        Assert.Equal(ExitCodes.Fine, Follow(_run.Folder, "--store", store, "--once").Code);
        string written = Path.Combine(_run.Root, "weights-" + Guid.NewGuid().ToString("N") + ".pt");

        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(["weights", "greenhouse-py", "--epoch", "last", "--out", written, "--store", store], output, error);

        // A followed run's snapshots stay in its folder as TorchScript files: the one of the latest epoch, byte for byte.
        Assert.True(code == ExitCodes.Fine, error.ToString());
        Assert.Contains("TorchScript of epoch 4", output.ToString(), StringComparison.Ordinal);
        Assert.Equal(File.ReadAllBytes(Path.Combine(_run.Folder, RunSnapshots.TorchScriptFile(4))), File.ReadAllBytes(written));
    }

    [Fact]
    public void IntegratedGradientsOnTheLoadedTorchScriptModelsAreComplete()
    {
        if (!Available())
            return;
        string store = NewStore();
        Assert.Equal(ExitCodes.Fine, Follow(_run.Folder, "--store", store, "--once").Code);

        using var reading = RunStore.OpenForReading(store);
        var run = reading.GetRun("greenhouse-py");
        var schema = FeatureSchema.FromDefinitions(run.Features.Select(f => new FeatureDefinition(f.Name, Enum.Parse<FeatureKind>(f.Kind), f.FirstColumn, f.ColumnCount)));
        int rows = run.HeldOutRows + run.TrainingRows;
        var dense = FloatBytes.ToFloats(run.ProbeDense);
        var categorical = FloatBytes.ToLongs(run.ProbeCategorical);
        foreach (var map in reading.Maps(run.Id, "integrated-gradients"))
        {
            // F(x) − F(x′) from the TorchScript file itself, through TorchSharp's loader, outside the attribution code.
            double[] gaps;
            using (var model = TorchScriptModel.Load(Path.Combine(_run.Folder, $"epoch-{map.Epoch:D4}.pt"), schema))
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
            _log.WriteLine($"epoch {map.Epoch}: mean completeness gap {meanError:G4}, mean |F(x) − F(x′)| {meanGap:G4}");
            // Sundararajan, Taly, Yan 2017, Prop. 1 (completeness): Σ attributions = F(x) − F(x′); within 1% at default steps.
            Assert.True(meanError <= 0.01 * meanGap, $"epoch {map.Epoch}: mean completeness gap {meanError:G4} against mean |F(x) − F(x′)| {meanGap:G4}");
            Assert.True(meanGap > 0.1, $"epoch {map.Epoch}: the model's outputs hardly move ({meanGap:G4}); the check would be empty");
        }
    }

    [Fact]
    public void AttributionsMatchIntegratedGradientsComputedByPyTorch()
    {
        if (!Available())
            return;
        string store = NewStore();
        Assert.Equal(ExitCodes.Fine, Follow(_run.Folder, "--store", store, "--once").Code);

        using var reading = RunStore.OpenForReading(store);
        var run = reading.GetRun("greenhouse-py");
        var map = reading.Maps(run.Id, "integrated-gradients").Single(m => m.Epoch == PythonRunFixture.ReferenceEpoch);
        var scores = FloatBytes.ToFloats(map.Scores);
        double worst = _run.WorstDifferenceFromPyTorch(scores, map.Rows, map.Features);
        _log.WriteLine($"largest difference from PyTorch's attributions: {worst:G4}");
        // The reference is computed by PyTorch 1.13 (Debian python3-torch) with torch.autograd on the eager model:
        // the same Integrated Gradients sum (midpoint rule, 64 steps, zero baseline), a general-purpose library's gradients.
        Assert.True(worst <= 1e-4, $"largest difference from PyTorch's attributions: {worst:G4}");
    }

    [Fact]
    public void FollowResumesAndSkipsEpochsAlreadyStored()
    {
        if (!Available())
            return;
        string partial = _run.CopyFolder("partial");
        File.Delete(Path.Combine(partial, "finished"));
        File.Delete(Path.Combine(partial, "epoch-0003.pt"));
        File.Delete(Path.Combine(partial, "epoch-0004.pt"));
        File.WriteAllLines(Path.Combine(partial, "metrics.jsonl"), File.ReadLines(Path.Combine(partial, "metrics.jsonl")).Take(2).ToList());
        string store = NewStore();

        var first = Follow(partial, "--store", store, "--once", "--run", "night");
        var second = Follow(_run.Folder, "--store", store, "--once", "--run", "night");

        Assert.True(first.Code == ExitCodes.Fine, first.Output + first.Error);
        Assert.Contains("epochs up to 2 are already stored", second.Output);
        Assert.DoesNotMatch(@"(?m)^epoch [12] ", second.Output);
        Assert.Matches(@"(?m)^epoch 3 ", second.Output);
        using var reading = RunStore.OpenForReading(store);
        Assert.Equal([1, 2, 3, 4], reading.Epochs(reading.GetRun("night").Id).Select(e => e.Epoch));
    }

    [Fact]
    public void WithoutItsEntryLayerTheRunGetsTheSameAttributions()
    {
        if (!Available())
            return;
        // The Python run declares body.0 as its entry layer (train_small_run.py), so follow walks the path past it; the
        // same folder without the declaration is attributed through the whole score method.
        Assert.Contains("\"entryLayer\": \"body.0\"", File.ReadAllText(Path.Combine(_run.Folder, "schema.json")), StringComparison.Ordinal);
        string plain = _run.CopyFolder("no-entry");
        Rewrite(Path.Combine(plain, "schema.json"), "\"entryLayer\": \"body.0\",", "");
        Rewrite(Path.Combine(plain, "schema.json"), "\"scoreAfterEntryMethod\": \"score_after_entry\",", "");
        Assert.DoesNotContain("entry", File.ReadAllText(Path.Combine(plain, "schema.json")), StringComparison.OrdinalIgnoreCase);
        string withEntry = NewStore(), without = NewStore();
        Assert.Equal(ExitCodes.Fine, Follow(_run.Folder, "--store", withEntry, "--once").Code);
        Assert.Equal(ExitCodes.Fine, Follow(plain, "--store", without, "--once", "--run", "greenhouse-py").Code);

        using var a = RunStore.OpenForReading(withEntry);
        using var b = RunStore.OpenForReading(without);
        Assert.All(a.Epochs(a.GetRun("greenhouse-py").Id), e => Assert.Empty(e.Problems)); // the entry check passed every epoch
        var mapsA = a.Maps(a.GetRun("greenhouse-py").Id, "integrated-gradients");
        var mapsB = b.Maps(b.GetRun("greenhouse-py").Id, "integrated-gradients");
        Assert.Equal(4, mapsA.Count);
        Assert.Equal(mapsA.Count, mapsB.Count);
        for (int m = 0; m < mapsA.Count; m++)
        {
            var x = FloatBytes.ToFloats(mapsA[m].Scores);
            var y = FloatBytes.ToFloats(mapsB[m].Scores);
            Assert.Equal(x.Length, y.Length);
            Assert.True(x.Max(Math.Abs) > 0.1, "the attributions are all near zero; the comparison would say nothing");
            for (int i = 0; i < x.Length; i++)
                Assert.True(Math.Abs(x[i] - y[i]) <= 1e-5, $"epoch {mapsA[m].Epoch}, value {i}: {x[i]} through the entry, {y[i]} without");
        }
    }

    [Theory]
    [InlineData("missing-epoch", "epoch 2 is missing its snapshot epoch-0002.pt", ExitCodes.BadInput)]
    [InlineData("corrupt-snapshot", "epoch-0003.pt' could not be loaded", ExitCodes.Fine)]
    [InlineData("missing-method", "epoch-0001.pt' has no method 'predict'", ExitCodes.Fine)]
    [InlineData("narrow-schema", "encode returned shape [64, 7] for 64 probe rows; the schema declares [64, 6]", ExitCodes.BadInput)]
    [InlineData("missing-entry-layer", "epoch-0001.pt' has no parameter 'body.9.weight' for the entry layer schema.json names; layers with a weight: bay, body.0, body.2", ExitCodes.Fine)]
    public void ABadFolderGetsOneClearLineAndLeavesTheStoreAlone(string damage, string expected, int resumedCode)
    {
        if (!Available())
            return;
        string store = NewStore();
        Assert.Equal(ExitCodes.Fine, Follow(_run.Folder, "--store", store, "--once").Code);
        string folder = _run.CopyFolder(damage);
        switch (damage)
        {
            case "missing-epoch":
                File.Delete(Path.Combine(folder, "epoch-0002.pt"));
                break;
            case "corrupt-snapshot":
                File.WriteAllText(Path.Combine(folder, "epoch-0003.pt"), "not a TorchScript archive");
                break;
            case "missing-method":
                Rewrite(Path.Combine(folder, "schema.json"), "\"scoreMethod\": \"score\"", "\"scoreMethod\": \"predict\"");
                break;
            case "missing-entry-layer":
                Rewrite(Path.Combine(folder, "schema.json"), "\"entryLayer\": \"body.0\"", "\"entryLayer\": \"body.9\"");
                break;
            default:
                Rewrite(Path.Combine(folder, "schema.json"), "\"columnCount\": 3", "\"columnCount\": 2");
                break;
        }
        byte[] before = SHA256.HashData(File.ReadAllBytes(store));

        var (code, output, error) = Follow(folder, "--store", store, "--once");
        Assert.Equal(before, SHA256.HashData(File.ReadAllBytes(store)));
        // Resuming the stored run from the damaged folder: the folder-wide gap and the changed schema are refused; a damaged
        // snapshot of an epoch already stored is never loaded again. Either way no epoch is added or changed (a resume
        // that goes ahead marks and unmarks its writer, so the file's bytes may differ; its epochs may not).
        var resumed = Follow(folder, "--store", store, "--once", "--run", "greenhouse-py");

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Contains(expected, error);
        Assert.Single(error.Trim().Split('\n'));
        Assert.DoesNotContain("internal error", error + output);
        using var reading = RunStore.OpenForReading(store);
        Assert.Null(reading.FindRun(damage));
        Assert.Equal(4, reading.Epochs(reading.GetRun("greenhouse-py").Id).Count);
        Assert.True(resumed.Code == resumedCode, resumed.Output + resumed.Error);
    }

    private bool Available() => _run.Available(_log);

    private string NewStore() => _run.NewStore();

    private static void Rewrite(string path, string from, string to)
    {
        string text = File.ReadAllText(path);
        Assert.Contains(from, text);
        File.WriteAllText(path, text.Replace(from, to, StringComparison.Ordinal));
    }

    private static (int Code, string Output, string Error) Follow(params string[] arguments)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(["follow", .. arguments], output, error);
        return (code, output.ToString(), error.ToString());
    }
}
