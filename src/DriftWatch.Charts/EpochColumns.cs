using System.Collections.Immutable;
using ScottPlot.TickGenerators;

namespace DriftWatch.Charts;

/// <summary>
/// The columns of an epoch × row grid (the heatmap, the neuron map). While the epoch numbers span at most
/// <see cref="MaximumByNumber"/> columns (or no more than there are stored epochs), there is one column per epoch number
/// and x is the epoch, so an epoch without data shows as an empty column. A wider span — a loop that passed its step
/// count as the epoch — gets one column per stored epoch, in order, at x = its position, with ticks naming the numbers:
/// the grid then costs its stored epochs, not its range.
/// </summary>
internal sealed class EpochColumns
{
    /// <summary>The widest range of epoch numbers laid out one column per number: 2,000, more than a picture can show apart.</summary>
    public const int MaximumByNumber = 2_000;

    private readonly ImmutableArray<int> _epochs;
    private readonly Dictionary<int, int> _positions;

    private EpochColumns(ImmutableArray<int> epochs)
    {
        _epochs = epochs;
        _positions = epochs.Select((epoch, i) => (epoch, i)).ToDictionary(p => p.epoch, p => p.i);
        long span = (long)epochs[^1] - epochs[0] + 1;
        ByNumber = span <= Math.Max(MaximumByNumber, epochs.Length);
        Count = ByNumber ? (int)span : epochs.Length;
    }

    /// <summary>Whether column c is epoch number first + c (else it is the c-th stored epoch).</summary>
    public bool ByNumber { get; }

    /// <summary>How many columns the grid has.</summary>
    public int Count { get; }

    /// <summary>The x of the first column's centre.</summary>
    public double First => X(0);

    /// <summary>The x of the last column's centre.</summary>
    public double Last => X(Count - 1);

    /// <summary>Lays out <paramref name="epochs"/>, stored epoch numbers in increasing order (at least one).</summary>
    public static EpochColumns Of(IEnumerable<int> epochs)
    {
        ArgumentNullException.ThrowIfNull(epochs);
        var list = epochs.ToImmutableArray();
        if (list.IsEmpty)
            throw new ArgumentException("an epoch grid needs at least one epoch", nameof(epochs));
        return new EpochColumns(list);
    }

    /// <summary>The position among the stored epochs of column <paramref name="column"/>'s epoch, or −1 when no stored epoch has its number.</summary>
    public int Position(int column) =>
        ByNumber ? _positions.GetValueOrDefault(_epochs[0] + column, -1) : column;

    /// <summary>The x of column <paramref name="column"/>'s centre.</summary>
    public double X(int column) => ByNumber ? _epochs[0] + (double)column : column;

    /// <summary>The x of the stored epoch at <paramref name="position"/>.</summary>
    public double XOfPosition(int position) => ByNumber ? _epochs[position] : position;

    /// <summary>A title note when the columns are stored epochs rather than numbers; null otherwise.</summary>
    public string? Note => ByNumber ? null : "one column per stored epoch, in order (epoch numbers jump)";

    /// <summary>
    /// Ticks naming the epoch numbers at stored positions, the first and last and evenly spaced ones between as
    /// <paramref name="width"/> pixels allow; null when the columns are numbers (the axis's own ticks are right).
    /// </summary>
    public NumericManual? Ticks(int width)
    {
        if (ByNumber)
            return null;
        var ticks = new NumericManual();
        foreach (var (x, label) in TickLabels(width))
            ticks.AddMajor(x, label);
        return ticks;
    }

    /// <summary>The positions and labels <see cref="Ticks"/> places; empty when the columns are numbers.</summary>
    public IReadOnlyList<(double X, string Label)> TickLabels(int width)
    {
        if (ByNumber)
            return [];
        int room = Math.Max(2, Math.Min(_epochs.Length, width / 110));
        return [.. Enumerable.Range(0, room)
            .Select(i => (int)Math.Round(i * (_epochs.Length - 1) / (double)Math.Max(1, room - 1)))
            .Distinct()
            .Select(c => ((double)c, ChartKit.Integer(_epochs[c])))];
    }
}
