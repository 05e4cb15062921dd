using DriftWatch.Cli;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Store files as they arrive the morning after: older formats are read, newer ones refused clearly, damaged and
/// foreign files get one line and exit 2, and no read command ever changes a byte of the store.
/// </summary>
public sealed class StoreInputTests
{
    private readonly ITestOutputHelper _output;

    public StoreInputTests(ITestOutputHelper output) => _output = output;

    [Fact]
    public void AStoreWrittenInFormatOneIsReadByThisVersion()
    {
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);

        using (var reader = RunStore.OpenForReading(store))
        {
            var run = reader.GetRun(SampleStore.Run);
            Assert.Equal([1, 2], reader.Epochs(run.Id).Select(e => e.Epoch));
            Assert.Equal(2, reader.Maps(run.Id).Count);
            Assert.Equal(2, reader.Verdicts(run.Id).Count);
            Assert.True(RunStore.FormatVersion >= 1);
        }
        foreach (var args in SampleStore.ReadCommands(store, SampleStore.Run, temp.File("charts")))
        {
            var (code, output, error) = SampleStore.Cli(args);
            Assert.True(code is ExitCodes.Fine or ExitCodes.Halt, $"{string.Join(' ', args)}: {code} {error}");
            Assert.NotEmpty(output);
        }
    }

    [Fact]
    public void ReadCommandsNeverChangeAByteOfTheStore()
    {
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        File.SetLastWriteTimeUtc(store, new DateTime(2026, 1, 1, 0, 0, 0, DateTimeKind.Utc));
        byte[] before = File.ReadAllBytes(store);
        string policy = temp.File("policy.json");
        File.WriteAllText(policy, """{ "patience": 1, "warmupEpochs": 0 }""");

        foreach (var args in SampleStore.ReadCommands(store, SampleStore.Run, temp.File("charts")).Append(["check", SampleStore.Run, "--store", store, "--policy", policy]))
        {
            var (code, _, error) = SampleStore.Cli(args);
            Assert.True(code is ExitCodes.Fine or ExitCodes.Halt, $"{string.Join(' ', args)}: {code} {error}");
        }

        Assert.Equal(before, File.ReadAllBytes(store));
        Assert.Equal(new DateTime(2026, 1, 1, 0, 0, 0, DateTimeKind.Utc), File.GetLastWriteTimeUtc(store));
        Assert.False(File.Exists(DemoRunAudit.LogFileOf(store)));
    }

    [Fact]
    public void AStoreOfANewerFormatIsRefusedByTheCliAndTheMonitorAndLeftUntouched()
    {
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        using (var raw = new LiteDB.LiteDatabase(new LiteDB.ConnectionString { Filename = store, Connection = LiteDB.ConnectionType.Shared }))
            raw.GetCollection("driftwatch").Update(new LiteDB.BsonDocument { ["_id"] = "format", ["version"] = RunStore.FormatVersion + 1 });
        byte[] before = File.ReadAllBytes(store);

        foreach (var args in SampleStore.ReadCommands(store, SampleStore.Run, temp.File("charts")))
            AssertOneLine(SampleStore.Cli(args), "newer DriftWatch");
        var writing = Assert.Throws<StoreException>(() => RunStore.OpenForWriting(store));
        Assert.Contains("upgrade DriftWatch", writing.Message);

        // The real program, end to end: its exit code is what a scheduler sees.
        using var process = ChildProcess.Start(ChildProcess.CliDll, "check", SampleStore.Run, "--store", store);
        Assert.Equal(ExitCodes.BadInput, process.WaitForExit());
        Assert.Contains("newer DriftWatch", process.Error);
        Assert.Single(process.Error.Trim().Split('\n'));

        Assert.Equal(before, File.ReadAllBytes(store));
        Finalizers.RunNow();
    }

    [Fact]
    public void AStoreLeftEmptyByAKillWhileItWasCreatedReadsAsHavingNoRuns()
    {
        using var temp = new TempFolder();
        string store = temp.File("new.litedb");
        // What a process killed between LiteDB creating the file and the first DriftWatch record leaves behind.
        using (var raw = new LiteDB.LiteDatabase(new LiteDB.ConnectionString { Filename = store, Connection = LiteDB.ConnectionType.Shared }))
            raw.GetCollectionNames().ToList();
        byte[] before = File.ReadAllBytes(store);

        var (code, output, _) = SampleStore.Cli("runs", "--store", store);
        var (showCode, _, showError) = SampleStore.Cli("show", "x", "--store", store);

        Assert.Equal(ExitCodes.Fine, code);
        Assert.StartsWith("No runs in", output, StringComparison.Ordinal);
        Assert.Equal(ExitCodes.BadInput, showCode);
        Assert.Contains("the store has no runs", showError);
        Assert.Equal(before, File.ReadAllBytes(store));
        using (var writer = RunStore.OpenForWriting(store))
            writer.AddRun(new RunDocument { Name = "adopted" });
        using var reader = RunStore.OpenForReading(store);
        Assert.Equal(["adopted"], reader.Runs().Select(r => r.Name));
    }

    [Theory]
    [InlineData(0.1)]
    [InlineData(0.5)]
    [InlineData(0.9)]
    [InlineData(0.99)]
    public void ATruncatedStoreIsRefusedWithOneLineWhereverItWasCut(double kept)
    {
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        var bytes = File.ReadAllBytes(store);
        File.WriteAllBytes(store, bytes[..(int)(bytes.Length * kept)]);
        byte[] before = File.ReadAllBytes(store);

        foreach (var args in SampleStore.ReadCommands(store, SampleStore.Run, temp.File("charts")))
            AssertOneLine(SampleStore.Cli(args), "truncated");
        Assert.Contains("truncated", Assert.Throws<StoreException>(() => RunStore.OpenForWriting(store)).Message);
        Assert.Equal(before, File.ReadAllBytes(store));
        Finalizers.RunNow();
    }

    [Fact]
    public void BadStoresAndPolicyFilesGetOneLineAndExitTwoAndTheStoreIsUnchanged()
    {
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        byte[] before = File.ReadAllBytes(store);
        var random = new Random(8);
        string Write(string name, byte[] content)
        {
            string path = temp.File(name);
            File.WriteAllBytes(path, content);
            return path;
        }
        string Text(string name, string content) => Write(name, System.Text.Encoding.UTF8.GetBytes(content));
        byte[] Noise(int length)
        {
            var noise = new byte[length];
            random.NextBytes(noise);
            return noise;
        }

        string[] stores =
        [
            temp.Path, // a folder
            Write("zero.litedb", []),
            Write("noise.litedb", Noise(40_000)),
            Write("picture.png", [0x89, .. "PNG\r\n\u001a\n"u8, .. Noise(20_000)]),
            Text("notes.csv", string.Concat(Enumerable.Repeat("epoch,loss\n1,0.5\n", 2000))),
            Write("header-only.litedb", File.ReadAllBytes(store)[..8192]),
            ForeignLiteDb(temp.File("shop.litedb")),
            temp.File("absent.litedb"),
        ];
        string[] policies =
        [
            Text("unknown-key.json", """{ "patiense": 2 }"""),
            Text("negative.json", """{ "patience": -1 }"""),
            Text("zero-threshold.json", """{ "generalisationLossThreshold": 0 }"""),
            Text("share-above-one.json", """{ "leakMinimumShare": 1.5 }"""),
            Text("too-few-resamples.json", """{ "bootstrapResamples": 3 }"""),
            Text("fraction.json", """{ "warmupEpochs": 1.5 }"""),
            Text("string-number.json", """{ "patience": "2" }"""),
            Text("null.json", """{ "patience": null }"""),
            Text("unknown-kind.json", """{ "haltOn": ["Leak", "Gremlins"] }"""),
            Text("kind-as-number.json", """{ "haltOn": [0] }"""),
            Text("kind-not-array.json", """{ "haltOn": "Leak" }"""),
            Text("huge.json", """{ "cusumThreshold": 1e400 }"""),
            Text("array.json", "[1, 2]"),
            Text("not-json.json", "patience = 2"),
            Text("empty.json", ""),
            Text("truncated.json", """{ "patience": 2"""),
            Write("binary.json", Noise(300)),
            temp.Path, // a folder
            temp.File("absent.json"),
        ];

        int tried = 0;
        foreach (string bad in stores)
        {
            foreach (var args in SampleStore.ReadCommands(bad, SampleStore.Run, temp.File("charts")))
            {
                AssertOneLine(SampleStore.Cli(args), "");
                tried++;
            }
        }
        foreach (string policy in policies)
        {
            var (code, output, error) = SampleStore.Cli("check", SampleStore.Run, "--store", store, "--policy", policy);
            AssertOneLine((code, output, error), "");
            Assert.Contains(Path.GetFileName(policy), error);
            tried++;
        }
        foreach (var args in new[]
        {
            new[] { "show", "no-such-run", "--store", store },
            ["show", SampleStore.Run, "--store", store, "--method", "shapley"],
            ["show", SampleStore.Run, "--store", store, "--top", "0"],
            ["chart", SampleStore.Run, "--store", store, "--width", "10"],
            ["check", SampleStore.Run, "--store", ""],
            ["runs", "--store", store, "--colour"],
            ["remove", SampleStore.Run, "--store", store],
        })
        {
            AssertOneLine(SampleStore.Cli(args), "");
            tried++;
        }

        Assert.Equal(before, File.ReadAllBytes(store));
        Assert.False(File.Exists(temp.File("absent.litedb")));
        _output.WriteLine($"bad inputs tried through the CLI: {tried}; each answered with one line and exit code 2; the store unchanged");
        Finalizers.RunNow();
    }

    private static string ForeignLiteDb(string path)
    {
        using var other = new LiteDB.LiteDatabase(path);
        other.GetCollection("orders").Insert(new LiteDB.BsonDocument { ["item"] = "tomatoes" });
        return path;
    }

    private static void AssertOneLine((int Code, string Output, string Error) result, string expected)
    {
        Assert.True(result.Code == ExitCodes.BadInput, $"exit {result.Code}: {result.Error}");
        Assert.Equal("", result.Output);
        Assert.Single(result.Error.Trim().Split('\n'));
        Assert.StartsWith("error: ", result.Error, StringComparison.Ordinal);
        Assert.Contains(expected, result.Error);
    }
}
