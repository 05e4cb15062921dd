using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>Which reference point in feature space a path or difference method starts from.</summary>
public enum BaselineKind
{
    /// <summary>All zeros (cheap; for embeddings, the zero vector).</summary>
    Zero,

    /// <summary>The mean of the training half's encoded rows at the current epoch.</summary>
    TrainingMean,

    /// <summary>A vector the caller gives, one value per feature-space column.</summary>
    Given,
}

/// <summary>A baseline choice; <see cref="BaselineKind.Given"/> holds the caller's vector.</summary>
/// <param name="Kind">The kind of baseline.</param>
/// <param name="Values">One value per feature-space column, for <see cref="BaselineKind.Given"/>.</param>
public sealed record Baseline(BaselineKind Kind, float[]? Values = null)
{
    /// <summary>The zero baseline (default).</summary>
    public static Baseline Zero { get; } = new(BaselineKind.Zero);

    /// <summary>The training-half mean baseline.</summary>
    public static Baseline TrainingMean { get; } = new(BaselineKind.TrainingMean);

    /// <summary>A caller-given baseline.</summary>
    public static Baseline FromValues(float[] values)
    {
        ArgumentNullException.ThrowIfNull(values);
        return new Baseline(BaselineKind.Given, (float[])values.Clone());
    }

    /// <summary>A short label for storage.</summary>
    public string Label => Kind switch
    {
        BaselineKind.Zero => "zero",
        BaselineKind.TrainingMean => "training-mean",
        _ => "given",
    };

    /// <summary>The baseline vector <c>[columns]</c> for encoded rows whose training half is <paramref name="training"/>.</summary>
    public Tensor Resolve(Tensor training, int columns)
    {
        ArgumentNullException.ThrowIfNull(training);
        return Kind switch
        {
            BaselineKind.Zero => zeros(columns, dtype: training.dtype),
            BaselineKind.TrainingMean => training.mean([0L]),
            _ when Values!.Length != columns => throw new DriftWatchException($"given baseline has {Values.Length} values but feature space has {columns} columns"),
            _ => tensor(Values!, dtype: training.dtype),
        };
    }
}
