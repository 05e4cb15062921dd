using System.Diagnostics;
using System.Text;
using DriftWatch.Cli;
using DriftWatch.Detection;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// The files the CLI reads — policy JSON and store files — mutated at random (seeded, bounded in count): every answer is
/// an exit code of 0, 1 or 2 with at most one line of error, never an internal error (3) and never a hang.
/// </summary>
public sealed class FuzzTests
{
    private const int PolicyMutations = 250;
    private const int StoreMutations = 120;

    // Only a hang should ever reach it; normal answers take milliseconds.
    private static readonly TimeSpan HangLimit = TimeSpan.FromSeconds(60);

    private readonly ITestOutputHelper _output;

    public FuzzTests(ITestOutputHelper output) => _output = output;

    [Fact]
    public async Task MutatedPolicyFilesNeverCrashOrHangTheCheckCommand()
    {
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        byte[] before = File.ReadAllBytes(store);
        byte[] seed = Encoding.UTF8.GetBytes("// a policy with every key\n" + GatePolicy.Default.ToJson());
        var random = new Random(2026);
        var tally = new Tally();
        string path = temp.File("policy.json");
        File.WriteAllBytes(path, seed);
        var unmutated = SampleStore.Cli("check", SampleStore.Run, "--store", store, "--policy", path);
        Assert.True(unmutated.Code is ExitCodes.Fine or ExitCodes.Halt, unmutated.Error);

        for (int i = 0; i < PolicyMutations; i++)
        {
            File.WriteAllBytes(path, MutateText(seed, random));
            var result = await RunAsync(["check", SampleStore.Run, "--store", store, "--policy", path]);
            tally.Add(result, $"policy mutation {i}: {Encoding.UTF8.GetString(File.ReadAllBytes(path)).ReplaceLineEndings(" ")}");
        }

        Assert.Equal(before, File.ReadAllBytes(store));
        _output.WriteLine($"policy fuzz: {PolicyMutations} mutated files; {tally}");
        tally.Examples.ForEach(e => _output.WriteLine("  e.g. " + e));
        tally.Failures.ForEach(f => _output.WriteLine("failure: " + f));
        Assert.Empty(tally.Failures);
        Finalizers.RunNow();
    }

    [Fact]
    public async Task MutatedStoreFilesNeverCrashOrHangAReadCommand()
    {
        using var temp = new TempFolder();
        byte[] original = File.ReadAllBytes(SampleStore.CopyTo(temp.Path, "original.litedb"));
        var random = new Random(1202);
        var tally = new Tally();
        string path = temp.File("mutated.litedb");

        for (int i = 0; i < StoreMutations; i++)
        {
            var (mutated, how) = MutateStore(original, random);
            File.WriteAllBytes(path, mutated);
            var commands = SampleStore.ReadCommands(path, SampleStore.Run, temp.File("charts")).ToList();
            // Charts are the slow command; one mutation in four draws one.
            foreach (var args in commands.Where(a => a[0] != "chart" || i % 4 == 0))
            {
                var result = await RunAsync(args);
                tally.Add(result, $"store mutation {i} ({how}), {args[0]}");
            }
            if (!File.ReadAllBytes(path).AsSpan().SequenceEqual(mutated))
                tally.Failures.Add($"store mutation {i} ({how}): a read command changed the file");
            File.Delete(DemoRunAudit.LogFileOf(path));
        }

        _output.WriteLine($"store fuzz: {StoreMutations} mutated stores; {tally}");
        tally.Examples.ForEach(e => _output.WriteLine("  e.g. " + e));
        tally.Failures.ForEach(f => _output.WriteLine("failure: " + f));
        Assert.Empty(tally.Failures);
        Finalizers.RunNow();
    }

    private static async Task<(int Code, string Output, string Error)> RunAsync(string[] args)
    {
        var clock = Stopwatch.StartNew();
        var run = Task.Run(() => SampleStore.Cli(args));
        try
        {
            return await run.WaitAsync(HangLimit);
        }
        catch (TimeoutException)
        {
            return (-1, "", $"no answer after {clock.Elapsed.TotalSeconds:F0} s: it hangs");
        }
    }

    // Mutations a hand-edited or damaged JSON file shows: flipped, lost or doubled bytes, stray tokens, extreme numbers.
    private static byte[] MutateText(byte[] seed, Random random)
    {
        var bytes = new List<byte>(seed);
        string[] tokens =
        [
            "{", "}", "[", "]", "\"", ",", ":", "-", "1e999", "-1e999", "null", "true", "NaN", "\u0000", "\"haltOn\"",
            "99999999999999999999", "-0", "/*", "\"patience\": 0,", "\"\\ud800\"", "\uFEFF", new string('[', 2000),
            "\"warmupEpochs\": 2147483648,", "\"haltOn\": [\"Leak\", \"Leak\"],", "0x10", "1_000", "\"seed\": -2147483648,",
        ];
        string[] values = ["0", "1", "-1", "2", "0.5", "0.999", "1e308", "-1e-308", "3.5", "20", "10000", "10001", "\"2\"", "[]", "{}", "true", "null", "[\"Leak\"]", "[\"Overfitting\", \"Caution\"]"];
        int edits = random.Next(3) == 0 ? 1 + random.Next(4) : 1;
        for (int e = 0; e < edits; e++)
        {
            int at = random.Next(bytes.Count + 1);
            switch (random.Next(10))
            {
                case >= 6:
                    // A plausible hand edit: one setting's value replaced, in range or not, of the right type or not.
                    string text = Encoding.UTF8.GetString([.. bytes]);
                    var settings = System.Text.RegularExpressions.Regex.Matches(text, @"(""\w+"":\s*)(\[[^\]]*\]|[^,\n}]+)");
                    if (settings.Count == 0)
                        break;
                    var setting = settings[random.Next(settings.Count)];
                    var value = setting.Groups[2];
                    text = string.Concat(text.AsSpan(0, value.Index), values[random.Next(values.Length)], text.AsSpan(value.Index + value.Length));
                    bytes = [.. Encoding.UTF8.GetBytes(text)];
                    break;
                case 0 when bytes.Count > 0:
                    bytes[Math.Min(at, bytes.Count - 1)] ^= (byte)(1 << random.Next(8));
                    break;
                case 1 when bytes.Count > 0:
                    int length = Math.Min(1 + random.Next(40), bytes.Count - Math.Min(at, bytes.Count - 1));
                    bytes.RemoveRange(Math.Min(at, bytes.Count - 1), length);
                    break;
                case 2:
                    int from = random.Next(bytes.Count);
                    bytes.InsertRange(at, bytes.GetRange(from, Math.Min(1 + random.Next(60), bytes.Count - from)));
                    break;
                case 3:
                    bytes.InsertRange(at, Encoding.UTF8.GetBytes(tokens[random.Next(tokens.Length)]));
                    break;
                case 4:
                    bytes.RemoveRange(at, bytes.Count - at); // truncated
                    break;
                default:
                    bytes.Insert(at, (byte)random.Next(256));
                    break;
            }
        }
        return [.. bytes];
    }

    // Damage a store file can suffer: flipped bits, a zeroed or misplaced 8 KiB page, a cut-off or extended file,
    // noise in a page header (where LiteDB keeps page types, ids and links).
    private static (byte[] Bytes, string How) MutateStore(byte[] original, Random random)
    {
        const int page = 8192;
        var bytes = (byte[])original.Clone();
        int pages = bytes.Length / page;
        switch (random.Next(7))
        {
            case 0:
                int flips = 1 + random.Next(16);
                for (int i = 0; i < flips; i++)
                    bytes[random.Next(bytes.Length)] ^= (byte)(1 << random.Next(8));
                return (bytes, $"{flips} flipped bits");
            case 1:
                for (int i = 0; i < 1 + random.Next(8); i++)
                    bytes[random.Next(page)] = (byte)random.Next(256);
                return (bytes, "noise in the header page");
            case 2:
                int zeroed = 1 + random.Next(pages - 1);
                Array.Clear(bytes, zeroed * page, page);
                return (bytes, $"page {zeroed} zeroed");
            case 3:
                int source = random.Next(pages), target = 1 + random.Next(pages - 1);
                Array.Copy(original, source * page, bytes, target * page, page);
                return (bytes, $"page {source} copied over page {target}");
            case 4:
                int damaged = random.Next(pages);
                for (int i = 0; i < 1 + random.Next(6); i++)
                    bytes[(damaged * page) + random.Next(32)] = (byte)random.Next(256);
                return (bytes, $"noise in the header of page {damaged}");
            case 5:
                var longer = new byte[bytes.Length + (page * (1 + random.Next(3)))];
                bytes.CopyTo(longer, 0);
                random.NextBytes(longer.AsSpan(bytes.Length));
                return (longer, "noise appended");
            default:
                int start = random.Next(bytes.Length - 64);
                random.NextBytes(bytes.AsSpan(start, 1 + random.Next(64)));
                return (bytes, $"noise at byte {start}");
        }
    }

    private sealed class Tally
    {
        private int _answers;
        private int _refused;

        public List<string> Failures { get; } = [];

        public void Add((int Code, string Output, string Error) result, string what)
        {
            _answers++;
            if (result.Code == ExitCodes.BadInput)
            {
                _refused++;
                if (result.Error.Trim().Split('\n').Length != 1 || !result.Error.StartsWith("error: ", StringComparison.Ordinal))
                    Failures.Add($"{what}: exit 2 without one error line: {result.Error}");
            }
            else if (result.Code is not (ExitCodes.Fine or ExitCodes.Halt))
            {
                Failures.Add($"{what}: exit {result.Code}: {result.Error.Split('\n')[0]}");
            }
            if (result.Code == ExitCodes.BadInput && Examples.Count < 4)
                Examples.Add(result.Error.Trim());
        }

        public List<string> Examples { get; } = [];

        public override string ToString() =>
            $"{_answers} command runs, {_refused} refused with one line (exit 2), {_answers - _refused - Failures.Count} answered, failures: {Failures.Count}";
    }
}
