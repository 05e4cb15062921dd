using System.Buffers.Binary;
using System.Globalization;
using DriftWatch.Attribution;
using DriftWatch.Cli;
using DriftWatch.Hooks;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// A run is its exact name: a name reused by a new training never mixes two trainings in one history, names that differ
/// only in case are two runs, and every name is found whatever order the writer's culture gave the store's name index.
/// </summary>
public sealed class RunIdentityTests
{
    // LiteDB 5's header page keeps the collation's compare options at byte 84 (EnginePragmas.P_COLLATION_SORT).
    private const int CollationSortOffset = 84;

    // The culture's LCID sits just before it (EnginePragmas.P_COLLATION_LCID); 1033 is en-US.
    private const int CollationLcidOffset = 80;
    private const int EnglishUnitedStatesLcid = 1033;

    private readonly ITestOutputHelper _output;

    public RunIdentityTests(ITestOutputHelper output) => _output = output;

    private static MonitorOptions Options(string store, SmallNet model, string run = "night-7") => new()
    {
        StorePath = store,
        RunName = run,
        Schema = model.Schema,
        Probe = TestProbes.Small(),
        Methods = [new IntegratedGradients(8)],
    };

    // Names seen in users' data that an index ordered by another culture than the reader's loses.
    private static readonly string[] UnusualNames =
    [
        "Zeta", "alpha", "Beta", "gamma", "/abs/path", "\"quoted\",comma", "=SUM(1)", "+plus", "@at", "-dash", "_under",
        "night 7", "Night-7", "night-7", "NIGHT-7", "Überprüfung", "温室-7", "a|b",
    ];

    [Fact]
    public void AReusedRunNameWithStoredEpochsIsRefusedUnlessResumeIsSetAndTheStoreIsUnchanged()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        using (var first = new TrainingMonitor(Options(store, model)))
        {
            for (int epoch = 1; epoch <= 3; epoch++)
                first.EndEpoch(model, epoch, new EpochMetrics(0.7, 0.7));
        }
        byte[] before = File.ReadAllBytes(store);

        var refused = Assert.Throws<DriftWatchException>(() => new TrainingMonitor(Options(store, model)));

        _output.WriteLine(refused.Message);
        Assert.DoesNotContain('\n', refused.Message);
        Assert.Contains("run 'night-7'", refused.Message);
        Assert.Contains("epochs up to 3", refused.Message);
        Assert.Contains("Resume", refused.Message);
        Assert.Equal(before, File.ReadAllBytes(store));
    }

    [Fact]
    public void AResumedRunRefusesEarlierAndRepeatedCompleteEpochsAndKeepsTheStoredOnes()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        using (var first = new TrainingMonitor(Options(store, model)))
        {
            for (int epoch = 1; epoch <= 3; epoch++)
                first.EndEpoch(model, epoch, new EpochMetrics(0.7 - 0.1 * epoch, 0.7));
        }

        // A second training under the same name whose loop counts from 1 again.
        using var again = new TrainingMonitor(Options(store, model) with { Resume = true });
        var early = again.EndEpoch(model, 1, new EpochMetrics(0.9, 0.9));
        var repeated = again.EndEpoch(model, 3, new EpochMetrics(0.9, 0.9));
        again.EndEpoch(model, 4, new EpochMetrics(0.2, 0.7));

        Assert.Contains("epoch 1 comes before epoch 3, the last stored epoch of run 'night-7'", Assert.Single(early.Reasons));
        Assert.Contains("epoch 3 of run 'night-7' is stored complete and is never replaced; pass epoch 4 or later", Assert.Single(repeated.Reasons));
        var epochs = again.Store.Epochs(again.Run.Id);
        Assert.Equal([1, 2, 3, 4], epochs.Select(e => e.Epoch));
        Assert.Equal(0.4, epochs[2].Metrics[EpochMetrics.TrainLossKey], 12); // the first training's epoch 3, not 0.9
        Assert.Equal(4, again.Store.Verdicts(again.Run.Id).Count);
    }

    [Fact]
    public void ARepeatedEpochStoredIncompleteIsRedone()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        using (var first = new TrainingMonitor(Options(store, model)))
        {
            first.EndEpoch(model, 1, new EpochMetrics(0.6, 0.7));
            first.EndEpoch(model, 2, new EpochMetrics(0.5, 0.7));
        }
        // Epoch 2 as a failed attribution left it: stored, with the failure among its problems.
        using (var writing = RunStore.OpenForWriting(store))
        {
            var run = writing.GetRun("night-7");
            var last = writing.Epochs(run.Id)[^1];
            writing.WriteEpoch(last with { Problems = ["attribution failed at epoch 2: out of memory"] });
        }

        using var resumed = new TrainingMonitor(Options(store, model) with { Resume = true });
        var verdict = resumed.EndEpoch(model, 2, new EpochMetrics(0.45, 0.7));

        Assert.DoesNotContain(verdict.Reasons, r => r.Contains("never replaced", StringComparison.Ordinal));
        var epochs = resumed.Store.Epochs(resumed.Run.Id);
        Assert.Equal([1, 2], epochs.Select(e => e.Epoch));
        Assert.Equal(0.45, epochs[1].Metrics[EpochMetrics.TrainLossKey], 12);
        Assert.Empty(epochs[1].Problems);
    }

    [Fact]
    public void RunNamesThatDifferOnlyInCaseAreTwoRunsAndALookupMatchesCaseExactly()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        new StoreBuilder().WithRun("Night-7").WithEpochs(3).Build(store);
        new StoreBuilder().WithRun("night-7").WithEpochs(2).Build(store);

        using (var reading = RunStore.OpenForReading(store))
        {
            Assert.Equal(["Night-7", "night-7"], reading.StoredRuns().Select(r => r.Name));
            Assert.Equal(3, reading.StoredEpochs("Night-7").Count);
            Assert.Equal(2, reading.StoredEpochs("night-7").Count);
            Assert.Throws<StoreException>(() => reading.StoredEpochs("NIGHT-7"));
        }
        var check = SampleStore.Cli("check", "NIGHT-7", "--store", store);
        Assert.Equal(ExitCodes.BadInput, check.Code);
        Assert.Contains("no run named 'NIGHT-7'", check.Error);
        var show = SampleStore.Cli("show", "night-7", "--store", store);
        Assert.Equal(ExitCodes.Fine, show.Code);
    }

    [Fact]
    public void AMonitorGivenANameThatDiffersInCaseStartsANewRun()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        using var model = new SmallNet(3, 5, 4);
        using (var first = new TrainingMonitor(Options(store, model, "Night-7")))
            first.EndEpoch(model, 1, new EpochMetrics(0.6, 0.7));

        using var second = new TrainingMonitor(Options(store, model, "night-7") with { Resume = true });

        Assert.Equal(-1, second.LastEpoch);
        Assert.Equal("night-7", second.Run.Name);
        Assert.Equal(2, second.Store.Runs().Count);
    }

    [Fact]
    public void EveryUnusualNameIsFoundWhenTheNameIndexWasOrderedByAnotherCultureAndReadingChangesNothing()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        foreach (string name in UnusualNames)
            new StoreBuilder().WithRun(name).WithEpochs(1).Build(store);
        // A writer with another culture (ICU) ordered the name index by its own rules; the header still names the
        // collation it believed in, which this process compares by differently. Flipping the header's compare options
        // between ordinal and ignore-case makes the stored order disagree with the reader's comparisons the same way.
        var bytes = File.ReadAllBytes(store);
        int sort = BinaryPrimitives.ReadInt32LittleEndian(bytes.AsSpan(CollationSortOffset));
        Assert.True(sort is (int)CompareOptions.Ordinal or (int)CompareOptions.IgnoreCase, $"unexpected collation options {sort} at byte {CollationSortOffset}: the LiteDB header layout changed");
        BinaryPrimitives.WriteInt32LittleEndian(bytes.AsSpan(CollationSortOffset), sort == (int)CompareOptions.Ordinal ? (int)CompareOptions.IgnoreCase : (int)CompareOptions.Ordinal);
        File.WriteAllBytes(store, bytes);

        var missed = new List<string>();
        foreach (string name in UnusualNames)
        {
            var (code, _, error) = SampleStore.Cli("check", name, "--store", store);
            if (code is not (ExitCodes.Fine or ExitCodes.Halt))
                missed.Add($"{name}: {error.Trim()}");
        }

        _output.WriteLine($"{UnusualNames.Length - missed.Count} of {UnusualNames.Length} names found");
        foreach (string miss in missed)
            _output.WriteLine("  missed " + miss);
        Assert.Empty(missed);
        Assert.Equal(bytes, File.ReadAllBytes(store)); // a reader never writes, not even to mend the index
    }

    [Fact]
    public void AStoreCreatedUnderACultureOpensAndFindsItsRunsWithoutBeingChanged()
    {
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        int epochs;
        using (var reading = RunStore.OpenForReading(store))
            epochs = reading.StoredEpochs(SampleStore.Run).Count;
        // What a training program with ICU and LANG=en_US leaves in the header: LiteDB records its culture's LCID (en-US).
        var bytes = File.ReadAllBytes(store);
        Assert.Equal(CultureInfo.InvariantCulture.LCID, BinaryPrimitives.ReadInt32LittleEndian(bytes.AsSpan(CollationLcidOffset)));
        BinaryPrimitives.WriteInt32LittleEndian(bytes.AsSpan(CollationLcidOffset), EnglishUnitedStatesLcid);
        File.WriteAllBytes(store, bytes);

        using (var reading = RunStore.OpenForReading(store))
            Assert.Equal(epochs, reading.StoredEpochs(SampleStore.Run).Count);
        var (code, _, error) = SampleStore.Cli("check", SampleStore.Run, "--store", store);

        Assert.True(code is ExitCodes.Fine or ExitCodes.Halt, error);
        Assert.Equal(bytes, File.ReadAllBytes(store));
    }

    [Fact]
    public void ANewStoreComparesNamesOrdinally()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        new StoreBuilder().WithRun("r").WithEpochs(1).Build(store);

        int sort = BinaryPrimitives.ReadInt32LittleEndian(File.ReadAllBytes(store).AsSpan(CollationSortOffset));

        Assert.Equal((int)CompareOptions.Ordinal, sort);
    }

    [Fact]
    public void AnOlderStoreWhoseNamesIgnoreCaseRefusesANameThatDiffersOnlyInCaseWithOneLine()
    {
        using var temp = new TempFolder();
        string store = SampleStore.CopyTo(temp.Path);
        string variant = SampleStore.Run.ToUpperInvariant();

        var refused = Assert.Throws<StoreException>(() => new StoreBuilder().WithRun(variant).WithEpochs(1).Build(store));

        _output.WriteLine(refused.Message);
        Assert.DoesNotContain('\n', refused.Message);
        Assert.Contains($"'{variant}'", refused.Message);
        Assert.Contains($"'{SampleStore.Run}'", refused.Message);
        using var reading = RunStore.OpenForReading(store);
        Assert.Equal([SampleStore.Run], reading.StoredRuns().Select(r => r.Name));
    }

    [Fact]
    public void TheDemoResumingANameThatDiffersInCaseStartsThatRunInsteadOfContinuingTheOther()
    {
        using var temp = new TempFolder();
        string store = temp.File("s.litedb");
        string[] common = ["--small", "--rows", "100", "--steps", "8", "--store", store, "--epochs", "1"];
        Demo([.. common, "--run", "Night-7"]);

        string output = Demo([.. common, "--run", "night-7", "--resume"]);

        Assert.Contains("run 'night-7' has no complete epoch yet; it starts at epoch 1", output);
        using var reading = RunStore.OpenForReading(store);
        Assert.Equal(["Night-7", "night-7"], reading.StoredRuns().Select(r => r.Name));
        Assert.Equal([1], reading.StoredEpochs("Night-7").Select(e => e.Epoch));
        Assert.Equal([1], reading.StoredEpochs("night-7").Select(e => e.Epoch));
    }

    private static string Demo(string[] args)
    {
        var output = new StringWriter();
        Assert.Equal(0, DriftWatch.Demo.GreenhouseTraining.Run(DriftWatch.Demo.DemoOptions.Parse(args), output));
        return output.ToString();
    }
}
