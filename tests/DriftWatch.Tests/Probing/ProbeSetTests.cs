using DriftWatch.Probing;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Probing;

public sealed class ProbeSetTests
{
    [Fact]
    public void SelectionIsDeterministicForASeed()
    {
        var heldOut = new RowsBuilder().WithRows(300).WithSeed(1).Build();
        var training = new RowsBuilder().WithRows(300).WithSeed(2).Build();

        var a = ProbeSet.Select(heldOut, training, perHalf: 50, seed: 11);
        var b = ProbeSet.Select(heldOut, training, perHalf: 50, seed: 11);
        var c = ProbeSet.Select(heldOut, training, perHalf: 50, seed: 12);

        Assert.Equal(a.Hash, b.Hash);
        Assert.Equal(a.Rows.Dense, b.Rows.Dense);
        Assert.NotEqual(a.Hash, c.Hash);
        Assert.Equal(50, a.HeldOutCount);
        Assert.Equal(50, a.TrainingCount);
    }

    [Fact]
    public void HashChangesWhenOneValueOrOneLabelChanges()
    {
        var heldOut = new RowsBuilder().WithRows(20).WithSeed(1).Build();
        var training = new RowsBuilder().WithRows(20).WithSeed(2).Build();
        var original = new ProbeSet(heldOut, training).Hash;

        var dense = (float[])training.Dense.Clone();
        dense[17] += 1e-6f;
        var nudged = new ProbeSet(heldOut, new ProbeRows(dense, training.DenseCount, training.Categorical, 1, training.Labels)).Hash;
        var labels = (float[])training.Labels!.Clone();
        labels[3] = 1 - labels[3];
        var relabelled = new ProbeSet(heldOut, new ProbeRows(training.Dense, training.DenseCount, training.Categorical, 1, labels)).Hash;
        var swapped = new ProbeSet(training, heldOut).Hash; // same rows, other halves

        Assert.Equal(4, new[] { original, nudged, relabelled, swapped }.Distinct().Count());
    }

    [Fact]
    public void SelectionKeepsEachLabelsShare()
    {
        // Stratified sampling keeps each stratum's proportion (common practice).
        var rows = new RowsBuilder().WithRows(400).WithSeed(5).Build();
        double positives = rows.Labels!.Average();

        var probe = ProbeSet.Select(rows, rows, perHalf: 100, seed: 3);
        double chosen = probe.Rows.Labels!.Take(100).Average();

        Assert.InRange(chosen * 100, Math.Floor(positives * 100), Math.Ceiling(positives * 100)); // largest-remainder rounding
    }

    [Fact]
    public void HalvesStayApartHeldOutFirst()
    {
        var heldOut = new RowsBuilder().WithRows(10).WithSeed(1).Build();
        var training = new RowsBuilder().WithRows(12).WithSeed(2).Build();
        var probe = new ProbeSet(heldOut, training);

        Assert.Equal(ProbeHalf.HeldOut, probe.HalfOf(9));
        Assert.Equal(ProbeHalf.Training, probe.HalfOf(10));
        Assert.Equal(heldOut.Dense, probe.Rows.Dense.Take(heldOut.Dense.Length));
        Assert.Equal(12, probe.HalfMarkers().Count(m => m == 1));
    }

    [Fact]
    public void MismatchedLengthsGetAClearError()
    {
        var e = Assert.Throws<DriftWatchException>(() => new ProbeRows(new float[7], 3, new long[2], 1, null));
        Assert.Contains("not a multiple of 3", e.Message);
    }
}
