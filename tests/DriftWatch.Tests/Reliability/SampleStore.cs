using System.IO.Compression;
using DriftWatch.Cli;

namespace DriftWatch.Tests.Reliability;

/// <summary>The format-1 sample store (Data/format1-store.PROVENANCE.md), copied out for a test to read or damage.</summary>
internal static class SampleStore
{
    public const string Run = "format-1-sample";

    /// <summary>Decompresses the sample into <paramref name="folder"/> and returns its path.</summary>
    public static string CopyTo(string folder, string name = "format1.litedb")
    {
        string path = Path.Combine(folder, name);
        using var source = new GZipStream(File.OpenRead(Path.Combine(AppContext.BaseDirectory, "Data", "format1-store.litedb.gz")), CompressionMode.Decompress);
        using var target = File.Create(path);
        source.CopyTo(target);
        return path;
    }

    /// <summary>Runs the CLI in this process.</summary>
    public static (int Code, string Output, string Error) Cli(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    /// <summary>Every read command over one run, as a person would run them the morning after.</summary>
    public static IEnumerable<string[]> ReadCommands(string store, string run, string chartFolder) =>
    [
        ["runs", "--store", store],
        ["show", run, "--store", store],
        ["check", run, "--store", store],
        ["check", run, "--store", store, "--json", "--any"],
        ["chart", run, "--store", store, "--out", chartFolder],
    ];
}
