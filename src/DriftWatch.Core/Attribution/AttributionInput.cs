using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>What an attribution method works on: the rows in feature space, a baseline, and the scalar to explain.</summary>
/// <param name="Score">Feature space <c>[n, columns]</c> to the attributed scalar per row <c>[n]</c>.</param>
/// <param name="Inputs">The probe rows in feature space, <c>[rows, columns]</c>, not requiring gradients.</param>
/// <param name="Baseline">The reference point, <c>[columns]</c> or <c>[rows, columns]</c>.</param>
/// <param name="ChunkRows">At most this many (expanded) rows go through the model at once, so memory stays bounded.</param>
public sealed record AttributionInput(Func<Tensor, Tensor> Score, Tensor Inputs, Tensor Baseline, int ChunkRows)
{
    /// <summary>The chunk size the monitor and <c>reattribute</c> use unless told otherwise: 2048 expanded rows.</summary>
    /// <remarks>
    /// Blocks of about two thousand rows keep a small model's activations in the processor's caches between the
    /// forward and the backward pass: on the demo model IG ran 6–9% faster than in blocks of 8192, and on a model of a
    /// million parameters no slower. Smaller blocks also bound the memory an attribution takes.
    /// </remarks>
    public const int DefaultChunkRows = 2048;

    /// <summary>Number of probe rows.</summary>
    public int Rows => (int)Inputs.shape[0];

    /// <summary>Feature-space width.</summary>
    public int Columns => (int)Inputs.shape[1];

    /// <summary>The baseline broadcast to <c>[rows, columns]</c>.</summary>
    public Tensor BaselineRows() => Baseline.dim() == 1 ? Baseline.unsqueeze(0).expand(Rows, Columns) : Baseline;

    /// <summary>Per feature-space column, the index of the feature group that owns it (a categorical's embedding columns share one); null when every column is its own group.</summary>
    /// <remarks>Perturbation methods (ablation, Shapley sampling) switch whole groups at once; gradient methods ignore it.</remarks>
    public IReadOnlyList<int>? ColumnOwners { get; init; }

    /// <summary>The hidden layer that layer methods (<see cref="ILayerMethod"/>) and neuron conductance attribute to; null for feature-space methods.</summary>
    public Model.WatchedLayer? Layer { get; init; }

    /// <summary>
    /// The attributed function split at the model's affine entry layer, when the model declares one
    /// (<see cref="Model.ILinearEntry"/>); Integrated Gradients then walks its path in that layer's output. Null for the
    /// whole function alone.
    /// </summary>
    public LinearEntry? Entry { get; init; }

    /// <summary>
    /// The input that attributes <paramref name="target"/> of <paramref name="model"/> over <paramref name="features"/>, with
    /// the schema's column ownership, blocks of at most <paramref name="chunkRows"/> expanded rows and fewer when
    /// <paramref name="memoryBudgetBytes"/> holds fewer (<see cref="MemoryBudget"/>), and, when the model declares an
    /// entry layer and <paramref name="splitAtEntry"/> is true, the split there after checking it on the first rows.
    /// </summary>
    /// <exception cref="DriftWatchException">The model's declared entry layer does not reproduce its score step.</exception>
    public static AttributionInput ForModel(
        Model.IWatchedModel model, Model.AttributionTarget target, Tensor features, Tensor baseline, int chunkRows, Model.FeatureSchema schema,
        bool splitAtEntry = true, long memoryBudgetBytes = MemoryBudget.DefaultBytes)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(target);
        Tensor Score(Tensor f) => target.Select(model.Score(f));
        var entry = splitAtEntry ? LinearEntry.Of(model, target) : null;
        entry?.Check(Score, features);
        int rows = MemoryBudget.ChunkRows(MemoryBudget.BytesPerRow(model.Module, Score, features), memoryBudgetBytes, chunkRows);
        return new AttributionInput(Score, features, baseline, rows) { Entry = entry }.WithSchema(schema);
    }

    /// <summary>The same input with the column ownership of <paramref name="schema"/>.</summary>
    public AttributionInput WithSchema(Model.FeatureSchema schema)
    {
        ArgumentNullException.ThrowIfNull(schema);
        return this with { ColumnOwners = schema.ColumnOwners() };
    }

    /// <summary>The feature-space columns of each group, in group order.</summary>
    /// <exception cref="DriftWatchException"><see cref="ColumnOwners"/> has the wrong length or leaves a group without columns.</exception>
    public int[][] Groups()
    {
        if (ColumnOwners is null)
            return Enumerable.Range(0, Columns).Select(c => new[] { c }).ToArray();
        if (ColumnOwners.Count != Columns)
            throw new DriftWatchException($"column owners name {ColumnOwners.Count} columns but the feature space has {Columns}; pass the schema the model's encode step follows");
        int groups = ColumnOwners.Count == 0 ? 0 : ColumnOwners.Max() + 1;
        var columns = Enumerable.Range(0, groups).Select(_ => new List<int>()).ToArray();
        for (int c = 0; c < ColumnOwners.Count; c++)
        {
            if (ColumnOwners[c] < 0)
                throw new DriftWatchException($"column {c} has owner {ColumnOwners[c]}; owners are feature indexes from 0");
            columns[ColumnOwners[c]].Add(c);
        }
        int empty = Array.FindIndex(columns, g => g.Count == 0);
        if (empty >= 0)
            throw new DriftWatchException($"feature group {empty} owns no column; owners must number the groups 0 to {groups - 1} without gaps");
        return columns.Select(g => g.ToArray()).ToArray();
    }
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
