using System.Collections.Immutable;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>What <see cref="SmoothGrad"/> averages over its noisy copies.</summary>
public enum SmoothGradVariant
{
    /// <summary>The signed gradient ∂F/∂x.</summary>
    Gradient,

    /// <summary>The averaged gradient times (x − x′), like <see cref="GradientTimesInput"/>.</summary>
    GradientTimesInput,
}

/// <summary>
/// SmoothGrad (Smilkov, Thorat, Kim, Viégas, Wattenberg 2017): the gradient averaged over copies of each row with
/// Gaussian noise added in feature space, or that average times (x − x′).
/// </summary>
/// <remarks>
/// Column c's noise has standard deviation σ_c = <see cref="NoiseFraction"/> × (max − min of column c over the probe
/// rows), following the paper's guidance of 10–20% of the input range. All rows × samples noisy copies go through the
/// model as one expanded batch cut into chunks of at most <see cref="AttributionInput.ChunkRows"/> rows; the noise is drawn
/// from <see cref="Seed"/> in expanded-row order, so the result does not depend on the chunk size. No completeness:
/// no output gaps are returned.
/// </remarks>
public sealed class SmoothGrad : IAttributionMethod
{
    /// <summary>The most noisy copies per row accepted.</summary>
    public const int MaximumSamples = 10_000;

    /// <summary>Creates the method.</summary>
    /// <param name="samples">Noisy copies per row. Default 50.</param>
    /// <param name="noiseFraction">σ as a fraction of each column's range over the probe rows, 0 to 10. Default 0.15.</param>
    /// <param name="variant">Plain gradient or gradient × input. Default <see cref="SmoothGradVariant.Gradient"/>.</param>
    /// <param name="seed">Seed of the noise. Default 0.</param>
    public SmoothGrad(int samples = 50, double noiseFraction = 0.15, SmoothGradVariant variant = SmoothGradVariant.Gradient, int seed = 0)
    {
        if (samples < 1 || samples > MaximumSamples)
            throw new DriftWatchException($"SmoothGrad samples must be between 1 and {MaximumSamples}; got {samples}");
        if (!(noiseFraction >= 0 && noiseFraction <= 10))
            throw new DriftWatchException($"SmoothGrad noise must be a fraction of each column's range between 0 and 10; got {noiseFraction.ToString(System.Globalization.CultureInfo.InvariantCulture)}");
        if (!Enum.IsDefined(variant))
            throw new ArgumentOutOfRangeException(nameof(variant), variant, "unknown SmoothGrad variant");
        Samples = samples;
        NoiseFraction = noiseFraction;
        Variant = variant;
        Seed = seed;
        Settings = MethodSettingsReader.Of(
            ("samples", MethodSettingsReader.Text(samples)),
            ("noise", MethodSettingsReader.Text(noiseFraction)),
            ("seed", MethodSettingsReader.Text(seed)));
    }

    /// <summary>Noisy copies per row.</summary>
    public int Samples { get; }

    /// <summary>σ as a fraction of each column's range over the probe rows.</summary>
    public double NoiseFraction { get; }

    /// <summary>What is averaged.</summary>
    public SmoothGradVariant Variant { get; }

    /// <summary>Seed of the noise.</summary>
    public int Seed { get; }

    /// <inheritdoc />
    public string Name => Variant == SmoothGradVariant.Gradient ? "smoothgrad" : "smoothgrad-x-input";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; }

    /// <summary>Rebuilds the method from stored settings (<c>samples</c>, <c>noise</c>, <c>seed</c>).</summary>
    public static SmoothGrad FromSettings(IReadOnlyDictionary<string, string> settings, SmoothGradVariant variant)
    {
        string name = variant == SmoothGradVariant.Gradient ? "smoothgrad" : "smoothgrad-x-input";
        var read = new MethodSettingsReader(name, settings);
        int samples = read.Int("samples", 50, 1, MaximumSamples);
        double noise = read.Double("noise", 0.15, 0, 10);
        int seed = read.Int("seed", 0, int.MinValue, int.MaxValue);
        read.RejectUnknown();
        return new SmoothGrad(samples, noise, variant, seed);
    }

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        Gradients.CheckChunk(input.ChunkRows);
        int rows = input.Rows, columns = input.Columns;
        using var scope = torch.NewDisposeScope();
        var x = input.Inputs.detach();
        var sigma = rows == 0
            ? torch.zeros(columns, dtype: x.dtype)
            : HeldScalars.Multiply(x.amax([0L]) - x.amin([0L]), NoiseFraction);
        var sum = torch.zeros(rows, columns, dtype: x.dtype);
        var normal = new GaussianStream(Seed);

        // Expanded index i = row * samples + sample; index_add_ puts each gradient back on its row whatever the chunking.
        long total = (long)rows * Samples;
        for (long start = 0; start < total; start += input.ChunkRows)
        {
            using var chunk = torch.NewDisposeScope();
            long end = Math.Min(total, start + input.ChunkRows);
            var index = torch.arange(start, end, dtype: ScalarType.Int64);
            var row = HeldScalars.FloorDivide(index, Samples);
            var noise = torch.tensor(normal.Next((int)(end - start) * columns), [end - start, columns]).to(x.dtype);
            var points = x.index_select(0, row) + noise * sigma.unsqueeze(0);
            HeldScalars.IndexAdd(sum, row, Gradients.Of(input.Score, points));
        }
        var mean = HeldScalars.Divide(sum, Samples);
        var scores = Variant == SmoothGradVariant.Gradient ? mean : mean * (x - input.BaselineRows());
        return new ColumnAttribution(rows, columns, Gradients.ToArray(scores), null, total);
    }

    /// <summary>Standard normal draws from a seeded stream (Box–Muller), the same sequence however it is cut into calls.</summary>
    private sealed class GaussianStream(int seed)
    {
        private readonly Random _random = new(seed);
        private float? _spare;

        public float[] Next(int count)
        {
            var values = new float[count];
            for (int i = 0; i < count; i++)
            {
                if (_spare is float spare)
                {
                    values[i] = spare;
                    _spare = null;
                    continue;
                }
                double u1 = 1.0 - _random.NextDouble(); // (0, 1]: the logarithm stays finite
                double u2 = _random.NextDouble();
                double radius = Math.Sqrt(-2.0 * Math.Log(u1));
                values[i] = (float)(radius * Math.Cos(2 * Math.PI * u2));
                _spare = (float)(radius * Math.Sin(2 * Math.PI * u2));
            }
            return values;
        }
    }
}
