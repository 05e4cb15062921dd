using System.Globalization;
using System.IO.Compression;
using System.Text;
using DriftWatch.Detection;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Detection;

// The detector's behaviour pinned on stored runs of every demo scenario (Data/replay-runs.PROVENANCE.md): each run is
// replayed under two policies and every statistic, verdict and finding is compared, as text, with what the detector
// gave when the sample was written. A change of the detector's structure must leave this text identical; a change of
// its behaviour regenerates the expected text on purpose (DRIFTWATCH_WRITE_REPLAY=path writes it) and says why in
// the commit.
public sealed class ReplayEqualityTests
{
    internal const string StoreFile = "replay-runs.litedb.gz";
    internal const string ExpectedFile = "replay-verdicts.txt.gz";

    /// <summary>The two policies replayed: the built-in one, and one that lets every rule fire early and often.</summary>
    internal static IReadOnlyList<(string Name, GatePolicy Policy)> Policies { get; } =
    [
        ("default", GatePolicy.Default),
        ("eager", GatePolicy.Default with
        {
            WarmupEpochs = 0,
            Patience = 1,
            GeneralisationLossThreshold = 2,
            LeakWidths = 1.0,
            LeakMinimumGap = 0.01,
            LeakAlignmentWidths = 1.0,
            LeakMinimumAlignmentGap = 0.2,
            LeakMinimumShare = 0.05,
            IdentifierWidths = 0.5,
            IdentifierCusumThreshold = 3,
            DominanceWidths = 1.5,
            PurityLowerBound = 0.6,
            HaltOn = [FindingKind.Leak, FindingKind.MemorisedIdentifier, FindingKind.DominantFeature, FindingKind.ProbableLeak, FindingKind.Overfitting, FindingKind.NumericalTrouble],
        }),
    ];

    [Fact]
    public void EveryStoredDemoRunReplaysToTheVerdictsItWasStoredWith()
    {
        using var folder = new TempFolder();
        string store = Unpack(folder.Path);
        string actual = Describe(store);
        string? write = Environment.GetEnvironmentVariable("DRIFTWATCH_WRITE_REPLAY");
        if (!string.IsNullOrEmpty(write))
        {
            using var output = new GZipStream(File.Create(write), CompressionLevel.SmallestSize);
            output.Write(Encoding.UTF8.GetBytes(actual));
        }

        string expected = ReadExpected();
        var expectedLines = expected.Split('\n');
        var actualLines = actual.Split('\n');
        for (int i = 0; i < Math.Min(expectedLines.Length, actualLines.Length); i++)
            Assert.True(expectedLines[i] == actualLines[i], $"line {i + 1} differs:\nexpected: {expectedLines[i]}\nactual:   {actualLines[i]}");
        Assert.Equal(expectedLines.Length, actualLines.Length);
    }

    [Fact]
    public void TheSampleHoldsEveryDemoScenarioAndFindingsOfEveryAttributionKind()
    {
        // Guards the pin itself: a sample without, say, a memorised identifier would let that rule change unseen.
        string expected = ReadExpected();
        foreach (string scenario in new[] { "default", "clean", "leak", "validation-leak", "strong-feature", "memorised-id", "noisy-labels" })
            Assert.Contains($"run {scenario}-seed", expected, StringComparison.Ordinal);
        foreach (string kind in new[] { "Leak", "MemorisedIdentifier", "DominantFeature", "ProbableLeak", "Overfitting" })
            Assert.Contains($"finding {kind} ", expected, StringComparison.Ordinal);
    }

    internal static string Unpack(string folder)
    {
        string path = System.IO.Path.Combine(folder, "replay-runs.litedb");
        using var source = new GZipStream(File.OpenRead(System.IO.Path.Combine(AppContext.BaseDirectory, "Data", StoreFile)), CompressionMode.Decompress);
        using var target = File.Create(path);
        source.CopyTo(target);
        return path;
    }

    private static string ReadExpected()
    {
        using var source = new GZipStream(File.OpenRead(System.IO.Path.Combine(AppContext.BaseDirectory, "Data", ExpectedFile)), CompressionMode.Decompress);
        using var reader = new StreamReader(source, Encoding.UTF8);
        return reader.ReadToEnd();
    }

    /// <summary>Every run of the store replayed under each policy, as canonical text.</summary>
    internal static string Describe(string storePath)
    {
        using var store = RunStore.OpenForReading(storePath);
        var text = new StringBuilder();
        foreach (var run in store.Runs().OrderBy(r => r.Name, StringComparer.Ordinal))
        {
            foreach (var (name, policy) in Policies)
            {
                foreach (var assessment in RunReview.Replay(store, run, policy))
                    Describe(text, run.Name, name, assessment);
            }
        }
        return text.ToString();
    }

    private static void Describe(StringBuilder text, string run, string policy, Assessment assessment)
    {
        var s = assessment.Statistics;
        var v = assessment.Verdict;
        text.Append(Invariant($"run {run} policy {policy} epoch {s.Epoch} trusted {s.Trusted}\n"));
        text.Append(Invariant($"  gl {R(s.GeneralisationLoss)} drift {R(s.Drift)} rank {R(s.RankAgreementWithBest)} jsd {R(s.JensenShannonFromPrevious)} jaccard {R(s.TopFiveJaccard)} lead {R(s.LeadWidthHeldOut)} {R(s.LeadWidthTraining)}\n"));
        Series(text, "shareHeldOut", s.ShareHeldOut);
        Series(text, "shareTraining", s.ShareTraining);
        Series(text, "shareHeldOutWidth", s.ShareHeldOutWidth);
        Series(text, "shareTrainingWidth", s.ShareTrainingWidth);
        Series(text, "shareGap", s.ShareGap);
        Series(text, "shareGapWidth", s.ShareGapWidth);
        Series(text, "alignmentHeldOut", s.AlignmentHeldOut);
        Series(text, "alignmentTraining", s.AlignmentTraining);
        Series(text, "alignmentGap", s.AlignmentGap);
        Series(text, "alignmentGapWidth", s.AlignmentGapWidth);
        text.Append("  shifted ").Append(string.Join(' ', s.Shifted.Select(b => b ? '1' : '0'))).Append('\n');
        text.Append(Invariant($"  verdict {v.Epoch} {v.Kind}\n"));
        foreach (string reason in v.Reasons)
            text.Append("  reason ").Append(reason).Append('\n');
        foreach (var f in v.Findings)
        {
            text.Append(Invariant($"  finding {f.Kind} {f.Severity} '{f.Feature}' size {R(f.Size)} floor {R(f.NoiseFloor)} epochs {f.Epochs.First}..{f.Epochs.Last} agreement {R(f.Agreement)} only [{string.Join(",", f.SeenOnlyBy)}]\n"));
            text.Append("    ").Append(f.Evidence).Append('\n');
        }
    }

    private static void Series(StringBuilder text, string name, IEnumerable<double> values) =>
        text.Append("  ").Append(name).Append(' ').Append(string.Join(' ', values.Select(R))).Append('\n');

    private static string R(double value) => value.ToString("R", CultureInfo.InvariantCulture);

    private static string Invariant(FormattableString text) => text.ToString(CultureInfo.InvariantCulture);
}
