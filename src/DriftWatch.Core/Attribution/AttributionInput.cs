using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>What an attribution method works on: the rows in feature space, a baseline, and the scalar to explain.</summary>
/// <param name="Score">Feature space <c>[n, columns]</c> to the attributed scalar per row <c>[n]</c>.</param>
/// <param name="Inputs">The probe rows in feature space, <c>[rows, columns]</c>, not requiring gradients.</param>
/// <param name="Baseline">The reference point, <c>[columns]</c> or <c>[rows, columns]</c>.</param>
/// <param name="ChunkRows">At most this many (expanded) rows go through the model at once, so memory stays bounded.</param>
public sealed record AttributionInput(Func<Tensor, Tensor> Score, Tensor Inputs, Tensor Baseline, int ChunkRows)
{
    /// <summary>Number of probe rows.</summary>
    public int Rows => (int)Inputs.shape[0];

    /// <summary>Feature-space width.</summary>
    public int Columns => (int)Inputs.shape[1];

    /// <summary>The baseline broadcast to <c>[rows, columns]</c>.</summary>
    public Tensor BaselineRows() => Baseline.dim() == 1 ? Baseline.unsqueeze(0).expand(Rows, Columns) : Baseline;
}

/// <summary>Per-column scores for every probe row, with the path method's convergence evidence.</summary>
public sealed class ColumnAttribution
{
    /// <summary>Creates a result; arrays are row-major <c>rows × columns</c>.</summary>
    public ColumnAttribution(int rows, int columns, float[] scores, float[]? outputGaps, long evaluations)
    {
        ArgumentNullException.ThrowIfNull(scores);
        if (scores.Length != rows * columns)
            throw new ArgumentException($"scores has {scores.Length} values; expected {rows} × {columns}", nameof(scores));
        if (outputGaps is not null && outputGaps.Length != rows)
            throw new ArgumentException($"outputGaps has {outputGaps.Length} values; expected {rows}", nameof(outputGaps));
        Rows = rows;
        Columns = columns;
        Scores = scores;
        OutputGaps = outputGaps;
        Evaluations = evaluations;
    }

    /// <summary>Probe rows.</summary>
    public int Rows { get; }

    /// <summary>Feature-space columns.</summary>
    public int Columns { get; }

    /// <summary>Row-major scores.</summary>
    public float[] Scores { get; }

    /// <summary>F(x) − F(baseline) per row, for methods that satisfy completeness; null otherwise.</summary>
    public float[]? OutputGaps { get; }

    /// <summary>Model evaluations (forward + backward counts as one) the method spent.</summary>
    public long Evaluations { get; }
}
