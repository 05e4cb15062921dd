using System.Globalization;
using System.Security.Cryptography;
using System.Text;
using DriftWatch.Cli;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;

namespace DriftWatch.Tests.Sharding;

/// <summary>Runs the CLI in process and reads re-attributed maps back as text, to compare stores document by document.</summary>
internal static class ShardKit
{
    /// <summary>
    /// The re-attribution the shard tests split: SmoothGrad with its own seeded noise, a method whose maps depend on a
    /// random stream, so equal results also show that a shard draws the same noise for an epoch as the whole job does.
    /// </summary>
    public static readonly string[] Method = ["--method", "smoothgrad", "--setting", "samples=4"];

    /// <summary>The name <see cref="Method"/>'s maps are stored under.</summary>
    public const string StoredName = "re-smoothgrad";

    private static readonly object WholeLock = new();

    /// <summary>The clean run re-attributed with <paramref name="method"/> in one piece, once per fixture (a store beside the fixture's; only read).</summary>
    public static string WholeReattribution(DemoStoreFixture fixture, string[] method)
    {
        lock (WholeLock)
        {
            string key = Convert.ToHexString(SHA256.HashData(Encoding.UTF8.GetBytes(string.Join('\n', method))))[..12];
            string store = Path.Combine(fixture.Folder, "whole-" + key + ".litedb");
            if (!File.Exists(store))
            {
                string partial = store + ".partial";
                File.Copy(fixture.StorePath, partial, overwrite: true);
                var (code, _, error) = RunCli(["reattribute", DemoStoreFixture.CleanRun, "--store", partial, .. method]);
                if (code != ExitCodes.Fine)
                    throw new InvalidOperationException($"the whole re-attribution failed ({code}): {error}");
                File.Move(partial, store);
            }
            return store;
        }
    }

    public static (int Code, string Output, string Error) RunCli(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    public static string Hash(string path) => Convert.ToHexString(SHA256.HashData(File.ReadAllBytes(path)));

    /// <summary>
    /// Every map and quality record of <paramref name="run"/> under <paramref name="method"/>, one line each, with every stored
    /// field but the wall-clock seconds (which differ from one computation to the next).
    /// </summary>
    public static IReadOnlyList<string> Documents(string store, string run, string method, bool withIds = false)
    {
        using var reading = RunStore.OpenForReading(store);
        var document = reading.GetRun(run);
        var lines = new List<string>();
        foreach (var map in reading.Maps(document.Id, method))
        {
            lines.Add(string.Join('|',
                withIds ? map.Id.ToString(CultureInfo.InvariantCulture) : "",
                map.Epoch.ToString(CultureInfo.InvariantCulture), map.Method, map.Target, map.Rows.ToString(CultureInfo.InvariantCulture), map.Features.ToString(CultureInfo.InvariantCulture),
                Convert.ToHexString(map.Scores), Bytes(map.Deltas), Bytes(map.OutputGaps),
                Half(map.HeldOut), Half(map.Training), map.Evaluations.ToString(CultureInfo.InvariantCulture),
                Settings(map.Settings), map.SourceMethod));
        }
        foreach (var quality in reading.Quality(document.Id, method))
        {
            lines.Add(string.Join('|',
                withIds ? quality.Id.ToString(CultureInfo.InvariantCulture) : "",
                quality.Epoch.ToString(CultureInfo.InvariantCulture), quality.Method, quality.Target,
                string.Join(';', quality.Agreement.Select(a => a.Method + "=" + Number(a.Spearman))),
                quality.Measured.ToString(), Number(quality.Infidelity), Number(quality.RelativeInfidelity), Number(quality.MaxSensitivity),
                Number(quality.RelativeMaxSensitivity), quality.QualityRows.ToString(CultureInfo.InvariantCulture), Settings(quality.QualitySettings),
                quality.QualityEvaluations.ToString(CultureInfo.InvariantCulture)));
        }
        return lines;
    }

    /// <summary>The complete epochs of a run.</summary>
    public static IReadOnlyList<int> Epochs(string store, string run)
    {
        using var reading = RunStore.OpenForReading(store);
        return [.. reading.Epochs(reading.GetRun(run).Id).Select(e => e.Epoch)];
    }

    private static string Bytes(byte[]? bytes) => bytes is null ? "null" : Convert.ToHexString(bytes);

    private static string Half(ImportanceDocument half)
    {
        var text = new StringBuilder();
        foreach (var values in new[] { half.MeanAbsolute, half.MeanSigned, half.Share, half.Alignment ?? [] })
            text.Append(string.Join(',', values.Select(Number))).Append(';');
        return text.ToString();
    }

    private static string Settings(Dictionary<string, string> settings) =>
        string.Join(',', settings.OrderBy(s => s.Key, StringComparer.Ordinal).Select(s => s.Key + "=" + s.Value));

    private static string Number(double value) => value.ToString("R", CultureInfo.InvariantCulture);
}
