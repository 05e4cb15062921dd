using DriftWatch.Model;

namespace DriftWatch.Attribution;

/// <summary>Rows × features scores for one (epoch, method, target); a categorical's score is the sum over its columns.</summary>
public sealed class AttributionMap
{
    /// <summary>Creates a map; <paramref name="scores"/> is row-major <c>rows × features</c>.</summary>
    /// <param name="rows">Probe rows.</param>
    /// <param name="features">Features.</param>
    /// <param name="scores">Row-major scores.</param>
    /// <param name="deltas">Per-row convergence delta |Σ scores − (F(x) − F(x′))|, or null for methods without completeness.</param>
    /// <param name="outputGaps">Per-row F(x) − F(x′), or null.</param>
    public AttributionMap(int rows, int features, float[] scores, float[]? deltas, float[]? outputGaps)
    {
        ArgumentNullException.ThrowIfNull(scores);
        ArgumentOutOfRangeException.ThrowIfNegative(rows);
        ArgumentOutOfRangeException.ThrowIfNegative(features);
        if (scores.Length != rows * features)
            throw new ArgumentException($"scores has {scores.Length} values; expected {rows} × {features}", nameof(scores));
        if (deltas is not null && deltas.Length != rows)
            throw new ArgumentException($"deltas has {deltas.Length} values; expected {rows}", nameof(deltas));
        if (outputGaps is not null && outputGaps.Length != rows)
            throw new ArgumentException($"outputGaps has {outputGaps.Length} values; expected {rows}", nameof(outputGaps));
        Rows = rows;
        Features = features;
        Scores = scores;
        Deltas = deltas;
        OutputGaps = outputGaps;
    }

    /// <summary>Probe rows.</summary>
    public int Rows { get; }

    /// <summary>Features.</summary>
    public int Features { get; }

    /// <summary>Row-major scores.</summary>
    public float[] Scores { get; }

    /// <summary>Per-row convergence delta, or null.</summary>
    public float[]? Deltas { get; }

    /// <summary>Per-row F(x) − F(x′), or null.</summary>
    public float[]? OutputGaps { get; }

    /// <summary>The score of one row for one feature.</summary>
    public float this[int row, int feature] => Scores[row * Features + feature];

    /// <summary>Sums column scores into feature scores using the schema's column ownership.</summary>
    public static AttributionMap FromColumns(ColumnAttribution columns, FeatureSchema schema)
    {
        ArgumentNullException.ThrowIfNull(columns);
        ArgumentNullException.ThrowIfNull(schema);
        if (columns.Columns != schema.ColumnCount)
            throw new DriftWatchException($"attribution has {columns.Columns} feature-space columns but the schema owns {schema.ColumnCount}; the model's encode step and the schema disagree");
        int[] owners = schema.ColumnOwners();
        int features = schema.Count;
        var scores = new float[columns.Rows * features];
        float[]? deltas = columns.OutputGaps is null ? null : new float[columns.Rows];
        for (int r = 0; r < columns.Rows; r++)
        {
            double total = 0;
            for (int c = 0; c < columns.Columns; c++)
            {
                float v = columns.Scores[r * columns.Columns + c];
                scores[r * features + owners[c]] += v;
                total += v;
            }
            if (deltas is not null)
                deltas[r] = (float)Math.Abs(total - columns.OutputGaps![r]);
        }
        return new AttributionMap(columns.Rows, features, scores, deltas, columns.OutputGaps);
    }

    /// <summary>Mean per-row convergence delta over the mean |F(x) − F(x′)|, or null without completeness data.</summary>
    public double? RelativeMeanDelta()
    {
        if (Deltas is null || OutputGaps is null || Rows == 0)
            return null;
        double gap = OutputGaps.Average(g => Math.Abs((double)g));
        return gap == 0 ? 0 : Deltas.Average(d => (double)d) / gap;
    }
}
