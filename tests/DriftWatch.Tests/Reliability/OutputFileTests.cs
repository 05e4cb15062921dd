using DriftWatch.Cli;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Every output file (chart, report, export) appears whole or not at all: on a full disk the command says so in one line
/// with exit 2, and leaves neither an empty or partial file nor its temporary file, and a file already there unchanged.
/// </summary>
public sealed class OutputFileTests
{
    private readonly ITestOutputHelper _output;

    public OutputFileTests(ITestOutputHelper output) => _output = output;

    [MountFact]
    public void EveryOutputRefusedByAFullDiskIsOneLineAndLeavesNoFile()
    {
        using var temp = new Support.TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        using var disk = ScratchFileSystem.MountForTest(1 << 20, _output);
        if (disk is null)
            return;
        string previous = disk.File("kept.csv");
        File.WriteAllText(previous, "an earlier export\n");
        string filler = disk.Fill(leave: 0);
        string[][] commands =
        [
            ["chart", SampleStore.Run, "--store", store, "--out", disk.File("charts")],
            ["report", SampleStore.Run, "--store", store, "--out", disk.File("report")],
            ["export", SampleStore.Run, "--store", store, "--format", "csv", "--out", previous],
            ["export", SampleStore.Run, "--store", store, "--format", "json", "--out", disk.File("run.json")],
            ["export", SampleStore.Run, "--store", store, "--format", "parquet", "--out", disk.File("run.parquet")],
        ];

        foreach (var args in commands)
        {
            var (code, _, error) = SampleStore.Cli(args);
            string said = error.Trim();
            _output.WriteLine($"{args[0]} {string.Join(' ', args.Skip(4))}: exit {code}: {said}");
            Assert.True(code == ExitCodes.BadInput, $"{string.Join(' ', args)}: exit {code}: {error}");
            Assert.DoesNotContain('\n', said);
            Assert.Contains("the disk is full", said);
        }

        // Before: the chart left a 0-byte PNG and exited 3; the exports left empty or partial files.
        var left = Directory.EnumerateFiles(disk.Path, "*", SearchOption.AllDirectories).Where(f => f != filler && f != previous).ToList();
        Assert.True(left.Count == 0, "left behind: " + string.Join(", ", left.Select(f => $"{Path.GetFileName(f)} ({new FileInfo(f).Length} bytes)")));
        Assert.Equal("an earlier export\n", File.ReadAllText(previous));
    }

    [Fact]
    public void AFullDiskIsToldApartFromOtherWriteFailures()
    {
        // ENOSPC is errno 28 on Linux; .NET carries it as the IOException's HResult.
        Assert.True(OutputFile.IsDiskFull(new IOException("No space left on device", 28)));
        Assert.True(OutputFile.IsDiskFull(new DriftWatchException("cannot write", new IOException("No space left on device", 28))));
        Assert.False(OutputFile.IsDiskFull(new IOException("Read-only file system", 30)));
    }

    [Fact]
    public void AFailedWriteKeepsTheFileThatWasThereAndLeavesNoTemporaryFile()
    {
        using var temp = new Support.TempFolder();
        string path = temp.File("table.csv");
        File.WriteAllText(path, "before");

        var refused = Assert.Throws<DriftWatchException>(() => OutputFile.Write(path, stream =>
        {
            stream.Write("half a tab"u8);
            throw new IOException("No space left on device", 28);
        }));

        Assert.Contains("the disk is full", refused.Message);
        Assert.Contains(path, refused.Message);
        Assert.Equal("before", File.ReadAllText(path));
        Assert.Equal([path], Directory.GetFiles(temp.Path));
        OutputFile.WriteText(path, "after");
        Assert.Equal("after", File.ReadAllText(path));
        Assert.Equal([path], Directory.GetFiles(temp.Path));
    }
}
