using DriftWatch.Attribution;
using DriftWatch.Charts;
using DriftWatch.Cli;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Layers;
using DriftWatch.Storage;
using DriftWatch.Tests.Charts;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Runs no sane loop writes but a store may hold: epoch numbers far apart (a loop passing its step count) and losses at
/// the ends of the double range. Every reading command answers, every chart is drawn, and the monitor refuses the
/// implausible epoch number before it is stored.
/// </summary>
public sealed class AbsurdRunTests
{
    private static readonly int[] FarApart = [1, 2, 100_000_000, int.MaxValue];

    [Fact]
    public void EpochsFarApartAreChartedAndReportedByTheirCountNotTheirRange()
    {
        using var temp = new TempFolder();
        string store = temp.File("far.litedb");
        new StoreBuilder().WithRun("far").WithEpochNumbers(FarApart).Build(store);
        string charts = temp.File("charts");

        // Before the heatmap laid out stored epochs, it allocated one column per epoch number: 2^31 columns, exit 3.
        foreach (var args in EveryReadingCommand(store, "far", charts, temp.File("far.csv"), temp.File("report")))
        {
            var (code, _, error) = SampleStore.Cli(args);
            Assert.True(code == ExitCodes.Fine, $"{string.Join(' ', args)} exited {code}: {error}");
        }
        foreach (string kind in new[] { "trend", "divergence", "heatmap", "drift" })
            PngAssert.IsChart(Path.Combine(charts, $"far-{kind}-integrated-gradients.png"), 1200, 700);
        Assert.Contains("2147483647", File.ReadAllText(Path.Combine(temp.File("report"), "far-report.md")), StringComparison.Ordinal);

        using var reader = RunStore.OpenForReading(store);
        var history = RunHistory.Load(reader, "far");
        Assert.Equal(FarApart, history.Epochs.Select(e => e.Epoch));
    }

    [Fact]
    public void ANeuronMapOfEpochsFarApartIsDrawnOneColumnPerAuditedEpoch()
    {
        using var temp = new TempFolder();
        var maps = FarApart.Select((epoch, i) => new LayerMapDocument
        {
            RunId = 1,
            Epoch = epoch,
            Layer = "hidden",
            Method = "layer-conductance",
            Target = "regression",
            Rows = 2,
            Units = 3,
            Scores = FloatBytes.FromFloats([.. Enumerable.Range(0, 6).Select(u => (float)((u % 3) - 1 + 0.1 * i))]),
            Outputs = FloatBytes.FromFloats([0f, 0f]),
        }).ToList();
        var audit = NeuronAudit.Run(maps, "regression", new NeuronAuditOptions());
        string path = temp.File("neurons.png");

        // Before, one column per epoch number: 2^31 columns, an OutOfMemoryException.
        new NeuronMapChart().Render(audit, "far", path, ChartSize.Default);

        PngAssert.IsChart(path, 1200, 700);
    }

    [Fact]
    public void AnEpochGridLaysOutNumbersWhileTheyFitAndStoredEpochsBeyond()
    {
        // A resumed run with a gap keeps its empty column at the missing epoch, as before.
        var gap = EpochColumns.Of([1, 2, 4]);
        Assert.True(gap.ByNumber);
        Assert.Equal(4, gap.Count);
        Assert.Equal([0, 1, -1, 2], Enumerable.Range(0, 4).Select(gap.Position));
        Assert.Equal((1.0, 4.0), (gap.First, gap.Last));
        Assert.Null(gap.Ticks(1200));
        Assert.Empty(gap.TickLabels(1200));
        Assert.Null(gap.Note);

        var far = EpochColumns.Of(FarApart);
        Assert.False(far.ByNumber);
        Assert.Equal(4, far.Count);
        Assert.Equal([0, 1, 2, 3], Enumerable.Range(0, 4).Select(far.Position));
        Assert.Equal((0.0, 3.0), (far.First, far.Last));
        Assert.NotNull(far.Ticks(1200));
        Assert.Equal([(0.0, "1"), (1.0, "2"), (2.0, "100000000"), (3.0, "2147483647")], far.TickLabels(1200));
        Assert.NotNull(far.Note);

        // The widest span still laid out by number, and one more.
        Assert.True(EpochColumns.Of([1, EpochColumns.MaximumByNumber]).ByNumber);
        Assert.False(EpochColumns.Of([1, EpochColumns.MaximumByNumber + 1]).ByNumber);
    }

    [Fact]
    public void LossesSpanningTheDoubleRangeAreLeftOutWithANoteAndEveryChartIsDrawn()
    {
        using var temp = new TempFolder();
        string store = temp.File("wide.litedb");
        new StoreBuilder().WithRun("wide").WithEpochs(4)
            .WithLosses(1e308, -1e308, 0.5, 0.4)
            .WithValidationLosses(-1e308, 1e308, 0.6, 0.5)
            .Build(store);
        string charts = temp.File("charts");

        // Before, ScottPlot's autoscaler met a span of 2e308 (infinite) and the trend chart, the drift chart and the
        // report failed with exit 3.
        foreach (var args in EveryReadingCommand(store, "wide", charts, temp.File("wide.csv"), temp.File("report")))
        {
            var (code, _, error) = SampleStore.Cli(args);
            Assert.True(code == ExitCodes.Fine, $"{string.Join(' ', args)} exited {code}: {error}");
        }
        foreach (string kind in new[] { "trend", "divergence", "heatmap", "drift" })
            PngAssert.IsChart(Path.Combine(charts, $"wide-{kind}-integrated-gradients.png"), 1200, 700);

        using var reader = RunStore.OpenForReading(store);
        var history = RunHistory.Load(reader, "wide");
        Assert.Equal(4, ChartKit.Undrawn(history.Epochs.SelectMany(e => new[] { e.TrainLoss, e.ValidationLoss })));
        // The losses of epochs 3 and 4 are still drawn, as one line each.
        var drawn = ChartKit.Segments(history.Epochs, e => e.TrainLoss);
        Assert.Equal([3.0, 4.0], Assert.Single(drawn).Xs);
    }

    [Fact]
    public void ValuesBeyondTheDrawnRangeBreakALineAndAreCounted()
    {
        double?[] values = [1e308, -1e308, 1e300, -1e300, 0.5, null, double.NaN, double.PositiveInfinity];
        Assert.Equal(2, ChartKit.Undrawn(values));
        Assert.Equal([false, false, true, true, true, false, false], values.Where(v => v is not null).Select(v => ChartKit.IsDrawn(v!.Value)));
        Assert.Equal("2 losses beyond ±1e300 are not drawn", ChartKit.UndrawnNote(2, "losses"));
        Assert.Null(ChartKit.UndrawnNote(0, "losses"));
    }

    [Fact]
    public void AnEpochNumberPastTheLimitIsRefusedWithOneLineAndTheRunGoesOn()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        string store = temp.File("steps.litedb");
        var options = new MonitorOptions
        {
            StorePath = store,
            RunName = "steps",
            Schema = model.Schema,
            Probe = TestProbes.Small(),
            Methods = [new IntegratedGradients(16)],
        };
        using (var monitor = new TrainingMonitor(options))
        {
            monitor.EndEpoch(model, 1, new EpochMetrics(0.7, 0.7));
            monitor.EndEpoch(model, 2, new EpochMetrics(0.6, 0.7));
            foreach (int epoch in new[] { 100_000_000, int.MaxValue, TrainingMonitor.MaximumEpoch + 1 })
            {
                var refused = monitor.EndEpoch(model, epoch, new EpochMetrics(0.6, 0.7));
                Assert.Equal(VerdictKind.Caution, refused.Kind);
                string reason = Assert.Single(refused.Reasons);
                Assert.Contains($"epoch {epoch} is above the largest epoch number the monitor takes, 1000000", reason, StringComparison.Ordinal);
                Assert.DoesNotContain('\n', reason);
            }

            // Before the limit, epoch 100000000 was stored and epoch 3 then came "after" it and was refused.
            var third = monitor.EndEpoch(model, 3, new EpochMetrics(0.5, 0.7));
            Assert.Equal(3, third.Epoch);
            Assert.DoesNotContain(third.Findings, f => f.Kind == FindingKind.MonitoringFailure);
            Assert.Equal(TrainingMonitor.MaximumEpoch, monitor.EndEpoch(model, TrainingMonitor.MaximumEpoch, new EpochMetrics(0.5, 0.7)).Epoch);
            Assert.Equal([1, 2, 3, TrainingMonitor.MaximumEpoch], monitor.Store.Epochs(monitor.Run.Id).Select(e => e.Epoch));
        }

        using var strict = new TrainingMonitor(options with { RunName = "steps-strict", Strict = true });
        var e = Assert.Throws<DriftWatchException>(() => strict.EndEpoch(model, int.MaxValue, new EpochMetrics(0.5, 0.7)));
        Assert.Contains("pass the epoch count, not the step count", e.Message, StringComparison.Ordinal);
    }

    private static IEnumerable<string[]> EveryReadingCommand(string store, string run, string charts, string export, string report) =>
    [
        ["runs", "--store", store],
        ["show", run, "--store", store],
        ["check", run, "--store", store],
        ["chart", run, "--store", store, "--out", charts, "--kind", "all"],
        ["report", run, "--store", store, "--out", report],
        ["export", run, "--store", store, "--out", export],
    ];
}
