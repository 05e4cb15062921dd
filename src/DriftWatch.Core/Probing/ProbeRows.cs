namespace DriftWatch.Probing;

/// <summary>Raw rows in the model's input form: dense floats and categorical ids, row-major, with optional labels.</summary>
public sealed class ProbeRows
{
    /// <summary>Creates rows from row-major arrays, checking that every length agrees.</summary>
    /// <param name="dense">Row-major dense values, <c>rows × denseCount</c>.</param>
    /// <param name="denseCount">Dense inputs per row.</param>
    /// <param name="categorical">Row-major categorical ids, <c>rows × categoricalCount</c>.</param>
    /// <param name="categoricalCount">Categorical inputs per row.</param>
    /// <param name="labels">One label per row (class index or regression value), or null.</param>
    public ProbeRows(float[] dense, int denseCount, long[] categorical, int categoricalCount, float[]? labels)
    {
        ArgumentNullException.ThrowIfNull(dense);
        ArgumentNullException.ThrowIfNull(categorical);
        if (denseCount < 0 || categoricalCount < 0 || denseCount + categoricalCount == 0)
            throw new DriftWatchException($"probe rows need at least one dense or categorical input; got {denseCount} dense and {categoricalCount} categorical");
        int rows = denseCount > 0 ? dense.Length / denseCount : categorical.Length / categoricalCount;
        if (dense.Length != rows * denseCount)
            throw new DriftWatchException($"probe rows: dense array has {dense.Length} values, not a multiple of {denseCount} dense inputs per row");
        if (categorical.Length != rows * categoricalCount)
            throw new DriftWatchException($"probe rows: categorical array has {categorical.Length} ids; expected {rows} rows × {categoricalCount} = {rows * categoricalCount}");
        if (labels is not null && labels.Length != rows)
            throw new DriftWatchException($"probe rows: {labels.Length} labels for {rows} rows; give one label per row");
        Dense = dense;
        DenseCount = denseCount;
        Categorical = categorical;
        CategoricalCount = categoricalCount;
        Labels = labels;
        Count = rows;
    }

    /// <summary>Row-major dense values.</summary>
    public float[] Dense { get; }

    /// <summary>Dense inputs per row.</summary>
    public int DenseCount { get; }

    /// <summary>Row-major categorical ids.</summary>
    public long[] Categorical { get; }

    /// <summary>Categorical inputs per row.</summary>
    public int CategoricalCount { get; }

    /// <summary>One label per row, or null.</summary>
    public float[]? Labels { get; }

    /// <summary>Number of rows.</summary>
    public int Count { get; }

    /// <summary>Copies the chosen rows, in the given order.</summary>
    public ProbeRows Take(IReadOnlyList<int> indices)
    {
        ArgumentNullException.ThrowIfNull(indices);
        var dense = new float[indices.Count * DenseCount];
        var cats = new long[indices.Count * CategoricalCount];
        float[]? labels = Labels is null ? null : new float[indices.Count];
        for (int i = 0; i < indices.Count; i++)
        {
            int r = indices[i];
            ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(r, Count);
            Array.Copy(Dense, r * DenseCount, dense, i * DenseCount, DenseCount);
            Array.Copy(Categorical, r * CategoricalCount, cats, i * CategoricalCount, CategoricalCount);
            if (labels is not null)
                labels[i] = Labels![r];
        }
        return new ProbeRows(dense, DenseCount, cats, CategoricalCount, labels);
    }

    /// <summary>Joins two row sets with the same layout, <paramref name="first"/>'s rows first.</summary>
    public static ProbeRows Concat(ProbeRows first, ProbeRows second)
    {
        ArgumentNullException.ThrowIfNull(first);
        ArgumentNullException.ThrowIfNull(second);
        if (first.DenseCount != second.DenseCount || first.CategoricalCount != second.CategoricalCount)
            throw new DriftWatchException("probe halves must have the same number of dense and categorical inputs");
        if ((first.Labels is null) != (second.Labels is null))
            throw new DriftWatchException("probe halves must both have labels or both have none");
        float[]? labels = first.Labels is null ? null : [.. first.Labels, .. second.Labels!];
        return new ProbeRows([.. first.Dense, .. second.Dense], first.DenseCount, [.. first.Categorical, .. second.Categorical], first.CategoricalCount, labels);
    }
}
