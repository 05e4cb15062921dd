using System.Diagnostics;
using DriftWatch.Cli;
using DriftWatch.Export;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Files that are not what their names promise: a store this user may not read, a named pipe named like a snapshot, and
/// names that a spreadsheet would run as formulas or a terminal as escape sequences.
/// </summary>
public sealed class HostileFileTests
{
    private readonly ITestOutputHelper _output;

    public HostileFileTests(ITestOutputHelper output) => _output = output;

    [Fact]
    public void AStoreThisUserMayNotReadIsOneLineAndExitTwoInTheCliAndTheDemo()
    {
        if (!OperatingSystem.IsLinux())
            return;
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        File.SetUnixFileMode(store, UnixFileMode.None);
        string[][] runs =
        [
            [ChildProcess.CliDll, "runs", "--store", store],
            [ChildProcess.CliDll, "show", SampleStore.Run, "--store", store],
            [ChildProcess.CliDll, "check", SampleStore.Run, "--store", store],
            [ChildProcess.DemoDll, "--small", "--store", store],
        ];
        foreach (var args in runs)
        {
            var (code, error) = RunWithoutReadOverride(args);
            string said = error.Trim();
            _output.WriteLine($"{Path.GetFileName(args[0])} {args[1]}: exit {code}: {said}");
            // Before: exit 3 and a 17-line trace of UnauthorizedAccessException.
            Assert.True(code == ExitCodes.BadInput, $"{string.Join(' ', args)}: exit {code}: {error}");
            Assert.DoesNotContain('\n', said);
            Assert.Contains(store, said);
            Assert.Contains("permission", said);
        }
    }

    [Fact]
    public async Task ANamedPipeNamedLikeASnapshotIsRefusedInOneLineNotWaitedOn()
    {
        if (!OperatingSystem.IsLinux())
            return;
        using var temp = new TempFolder();
        string folder = temp.File("run");
        Directory.CreateDirectory(folder);
        File.WriteAllText(Path.Combine(folder, "schema.json"), """{"features": [{"name": "a", "kind": "dense", "firstColumn": 0, "columnCount": 1}]}""");
        File.WriteAllText(Path.Combine(folder, "probe.csv"), "a,label,half\n" + string.Concat(Enumerable.Range(0, 8).Select(i => $"{i},{i % 2},{(i < 4 ? "held-out" : "training")}\n")));
        File.WriteAllText(Path.Combine(folder, "metrics.jsonl"), "{\"epoch\": 1, \"train_loss\": 0.5, \"validation_loss\": 0.6}\n");
        string pipe = Path.Combine(folder, "epoch-0001.pt");
        using (var mkfifo = Process.Start("mkfifo", [pipe]))
            mkfifo.WaitForExit();

        var following = Task.Run(() => SampleStore.Cli("follow", folder, "--store", temp.File("s.litedb"), "--once"));
        if (await Task.WhenAny(following, Task.Delay(ChildProcess.HangLimit)) != following)
        {
            // Before: follow waited in open(2) for a writer; opening the other end lets it go so the test can end.
            using (new FileStream(pipe, FileMode.Open, FileAccess.Write))
            {
            }
            await following;
            Assert.Fail("follow --once waited on the named pipe");
        }
        var (code, _, error) = await following;
        _output.WriteLine($"exit {code}: {error.Trim()}");
        Assert.Equal(ExitCodes.BadInput, code);
        Assert.DoesNotContain('\n', error.Trim());
        Assert.Contains("named pipe (FIFO)", error);
        Assert.Contains("epoch-0001.pt", error);
    }

    [Fact]
    public void TheCsvExportKeepsFormulasAndControlCharactersOutOfASpreadsheetUnlessAskedForExactNames()
    {
        using var temp = new TempFolder();
        string storePath = NamedStore(temp, "=run", "=HYPERLINK(\"http://x\")", "+1", "-2+3", "@SUM(A1)", "esc\u001B[31mred", "nul\0x", "plain");

        var (safeCode, _, safeError) = SampleStore.Cli("export", "=run", "--store", storePath, "--out", temp.File("safe.csv"));
        var (exactCode, _, exactError) = SampleStore.Cli("export", "=run", "--store", storePath, "--out", temp.File("exact.csv"), "--exact-names");

        Assert.True(safeCode == ExitCodes.Fine, safeError);
        Assert.True(exactCode == ExitCodes.Fine, exactError);
        string safe = File.ReadAllText(temp.File("safe.csv"));
        var cells = safe.Split("\r\n").Skip(1).Where(l => l.Length > 0).Select(l => l.Split(',')).ToList();
        // Before: every name as stored, so "=HYPERLINK(…)" ran as a formula and ESC reached whoever printed the file.
        Assert.All(cells, c => Assert.Equal("'=run", c[0]));
        Assert.Contains("\"'=HYPERLINK(\"\"http://x\"\")\"", safe);
        Assert.Contains(",'+1,", safe);
        Assert.Contains(",'-2+3,", safe);
        Assert.Contains(",'@SUM(A1),", safe);
        Assert.Contains(",esc[31mred,", safe);
        Assert.Contains(",nulx,", safe);
        Assert.Contains(",plain,", safe);
        Assert.DoesNotContain(safe, c => char.IsControl(c) && c is not '\r' and not '\n');
        // Numbers are never changed: negative values keep their sign.
        Assert.Equal(File.ReadAllText(temp.File("exact.csv")).Count(c => c == '-'), safe.Count(c => c == '-'));

        string exact = File.ReadAllText(temp.File("exact.csv"));
        Assert.Contains(",esc\u001B[31mred,", exact);
        Assert.Contains(",nul\0x,", exact);
        Assert.Contains(",@SUM(A1),", exact);
    }

    [Fact]
    public void NoTextOutputCarriesAnEscapeOrNulFromAName()
    {
        using var temp = new TempFolder();
        const string Run = "night\u001B]0;owned\u0007\0";
        string storePath = NamedStore(temp, Run, "esc\u001B[2Jclear", "nul\0x", "bell\u0007");
        var texts = new List<string>();
        foreach (var args in new[] { ["runs"], ["show", Run], ["check", Run], ["check", Run, "--json"], new[] { "report", Run, "--out", temp.File("report") } })
        {
            var (code, output, error) = SampleStore.Cli([.. args, "--store", storePath]);
            Assert.True(code is ExitCodes.Fine or ExitCodes.Halt, $"{args[0]}: exit {code}: {error}");
            texts.Add(output + error);
        }
        texts.AddRange(Directory.GetFiles(temp.File("report"), "*-report.*").Select(File.ReadAllText));

        // Already so (DisplayText.Clean escapes every control character, JSON escapes them); pinned here with the attack.
        Assert.Equal(7, texts.Count);
        Assert.Contains("night\\u001B]0;owned", texts[0]); // the name is shown, escaped
        Assert.All(texts, t => Assert.DoesNotContain(t, c => c is '\u001B' or '\0' or '\u0007'));
    }

    // A store with one run of two epochs under hostile names.
    private static string NamedStore(TempFolder temp, string run, params string[] features)
    {
        string path = temp.File("names.litedb");
        new StoreBuilder().WithRun(run).WithFeatures(features).WithEpochs(2).Build(path);
        return path;
    }

    // Runs dotnet ASSEMBLY args… as this user without the capabilities that let root read any file (CAP_DAC_OVERRIDE,
    // CAP_DAC_READ_SEARCH), so a file without read permission is unreadable even when the tests run as root.
    private static (int Code, string Output) RunWithoutReadOverride(string[] args)
    {
        bool root = File.ReadLines("/proc/self/status").Any(l => l.StartsWith("Uid:\t0\t", StringComparison.Ordinal));
        string[] dropCapabilities = ["--inh-caps=-dac_override,-dac_read_search", "--bounding-set=-dac_override,-dac_read_search", "--"];
        return root
            ? Follow.PythonRunFixture.RunProcess("setpriv", [.. dropCapabilities, ChildProcess.DotnetHost(), .. args])
            : Follow.PythonRunFixture.RunProcess(ChildProcess.DotnetHost(), args);
    }
}
