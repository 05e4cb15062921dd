using System.Globalization;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Two writers at once: creating one new store file together, and a second writer opening a run another process still
/// writes (refused with one line naming that writer, unless it is gone or its heartbeat is stale).
/// </summary>
public sealed class TwoWriterTests
{
    private readonly ITestOutputHelper _output;

    public TwoWriterTests(ITestOutputHelper output) => _output = output;

    [Fact]
    public void WritersCreatingOneNewStoreAtOnceAllSucceed()
    {
        using var temp = new TempFolder();
        const int Files = 12;
        const int Writers = 4;
        var failures = new List<string>();
        for (int file = 0; file < Files; file++)
        {
            string path = temp.File(string.Create(CultureInfo.InvariantCulture, $"new-{file}.litedb"));
            using var start = new Barrier(Writers);
            var seen = new string?[Writers];
            var threads = Enumerable.Range(0, Writers).Select(i => new Thread(() =>
            {
                start.SignalAndWait();
                try
                {
                    using var store = RunStore.OpenForWriting(path);
                }
                catch (StoreException e)
                {
                    seen[i] = e.Message;
                }
            })).ToArray();
            foreach (var thread in threads)
                thread.Start();
            foreach (var thread in threads)
                thread.Join();
            failures.AddRange(seen.OfType<string>());
            using var reader = RunStore.OpenForReading(path);
            Assert.Empty(reader.StoredRuns());
        }
        foreach (string failure in failures.Distinct())
            _output.WriteLine(failure);
        _output.WriteLine($"{Files} new stores, {Writers} writers each at once: {failures.Count} failed");
        Assert.Empty(failures);
    }
}
