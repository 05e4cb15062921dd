using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>An epoch's quality figures for one method's map, measured on a subsample of the probe set.</summary>
/// <param name="Infidelity">Mean squared gap between the output change the map predicts for a removed feature subset and the change the model shows (squared output units); 0 is perfect.</param>
/// <param name="RelativeInfidelity"><paramref name="Infidelity"/> over the mean squared output change: 0 perfect, 1 no better than predicting no change; NaN when no removal changed the output.</param>
/// <param name="MaxSensitivity">Mean over rows of the largest L2 change of the row's feature scores within the neighbourhood; NaN when not measured.</param>
/// <param name="RelativeMaxSensitivity">The same per row over the L2 norm of the row's own feature scores; NaN when not measured.</param>
/// <param name="Rows">Rows in the subsample.</param>
/// <param name="Evaluations">Model evaluations the figures cost (forward + backward counts as one).</param>
public sealed record QualityFigures(double Infidelity, double RelativeInfidelity, double MaxSensitivity, double RelativeMaxSensitivity, int Rows, long Evaluations);

/// <summary>
/// Infidelity and max-sensitivity of an attribution map (Yeh, Hsieh, Suggala, Inouye, Ravikumar 2019, "On the (In)fidelity
/// and Sensitivity of Explanations").
/// </summary>
/// <remarks>
/// <para>Infidelity is E_I[(Iᵀ Φ − (F(x) − F(x − I)))²]. Our maps are contributions (a feature's score is in output units, not per
/// unit of input), so the perturbation removes a random subset S of feature groups — I = s ⊙ (x − x′), each group's s in {0, 1}
/// with the removal probability — and Iᵀ Φ becomes Σ_{g ∈ S} Φ_g: the output change the map predicts when those features are set
/// to the baseline. For a linear model, gradient × input and Integrated Gradients predict it exactly (infidelity 0).</para>
/// <para>Max-sensitivity is max_{‖y − x‖ ≤ r} ‖Φ(y) − Φ(x)‖, estimated by recomputing the map at uniformly drawn y in a box whose
/// half-width per column is the radius times the column's range over the probe rows; the maximum over the draws is taken per row
/// and averaged over rows. Feature scores (columns summed per group) enter both figures.</para>
/// </remarks>
public static class MapQuality
{
    /// <summary>Measures the figures for <paramref name="method"/>, whose map of every probe row in <paramref name="input"/> is <paramref name="map"/>.</summary>
    /// <param name="method">The method that made the map; it is run again on perturbed rows for max-sensitivity.</param>
    /// <param name="input">The probe rows, baseline, score function and column owners the map was made with.</param>
    /// <param name="map">The map's column scores for every row of <paramref name="input"/>.</param>
    /// <param name="options">Subsample size, perturbations and seed.</param>
    public static QualityFigures Measure(IAttributionMethod method, AttributionInput input, ColumnAttribution map, QualityOptions options)
    {
        ArgumentNullException.ThrowIfNull(method);
        ArgumentNullException.ThrowIfNull(input);
        ArgumentNullException.ThrowIfNull(map);
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        if (map.Rows != input.Rows || map.Columns != input.Columns)
            throw new ArgumentException($"map is {map.Rows} × {map.Columns} but the input is {input.Rows} × {input.Columns}", nameof(map));
        var groups = input.Groups();
        var random = new Random(options.Seed);
        var sample = Enumerable.Range(0, input.Rows).ToArray();
        random.Shuffle(sample);
        sample = [.. sample.Take(Math.Min(options.SampleRows, input.Rows)).Order()];
        var scores = FeatureScores(map.Scores, sample, groups, map.Columns);

        using var scope = torch.NewDisposeScope();
        var index = torch.tensor(sample.Select(r => (long)r).ToArray());
        var x = input.Inputs.detach().index_select(0, index);
        var baseline = input.BaselineRows().detach().index_select(0, index);
        var (infidelity, relative, infidelityEvaluations) = Infidelity(input, groups, x, baseline, scores, options, random);
        var (sensitivity, relativeSensitivity, sensitivityEvaluations) = MaxSensitivity(method, input, groups, x, baseline, scores, options, random);
        return new QualityFigures(infidelity, relative, sensitivity, relativeSensitivity, sample.Length, infidelityEvaluations + sensitivityEvaluations);
    }

    private static (double Infidelity, double Relative, long Evaluations) Infidelity(
        AttributionInput input, int[][] groups, Tensor x, Tensor baseline, double[] scores, QualityOptions options, Random random)
    {
        int rows = (int)x.shape[0], columns = input.Columns, players = groups.Length, k = options.InfidelityPerturbations;
        var removed = new bool[rows * k * players];
        for (int i = 0; i < removed.Length; i++)
            removed[i] = random.NextDouble() < options.RemovalProbability;
        var columnRemoved = new bool[(long)rows * k * columns];
        for (int p = 0; p < rows * k; p++)
        {
            for (int g = 0; g < players; g++)
            {
                if (!removed[p * players + g])
                    continue;
                foreach (int c in groups[g])
                    columnRemoved[(long)p * columns + c] = true;
            }
        }

        // Expanded index p = row * k + perturbation; F is evaluated at every perturbed point in chunks.
        var atInput = Gradients.Scores(input.Score, x, input.ChunkRows);
        var perturbed = new float[rows * k];
        using (torch.no_grad())
        {
            var mask = torch.tensor(columnRemoved, [rows * k, columns]);
            for (long start = 0; start < (long)rows * k; start += input.ChunkRows)
            {
                using var chunk = torch.NewDisposeScope();
                long end = Math.Min((long)rows * k, start + input.ChunkRows);
                var row = HeldScalars.FloorDivide(torch.arange(start, end, dtype: ScalarType.Int64), k);
                var points = torch.where(mask[TensorIndex.Slice(start, end)], baseline.index_select(0, row), x.index_select(0, row));
                Gradients.CopyTo(input.Score(points), perturbed, (int)start);
            }
        }

        double squaredGap = 0, squaredChange = 0;
        for (int r = 0; r < rows; r++)
        {
            for (int j = 0; j < k; j++)
            {
                int p = r * k + j;
                double predicted = 0;
                for (int g = 0; g < players; g++)
                {
                    if (removed[p * players + g])
                        predicted += scores[r * players + g];
                }
                double change = (double)atInput[r] - perturbed[p];
                squaredGap += (predicted - change) * (predicted - change);
                squaredChange += change * change;
            }
        }
        int n = rows * k;
        double infidelity = squaredGap / n;
        return (infidelity, squaredChange > 0 ? squaredGap / squaredChange : double.NaN, rows + (long)n);
    }

    private static (double Sensitivity, double Relative, long Evaluations) MaxSensitivity(
        IAttributionMethod method, AttributionInput input, int[][] groups, Tensor x, Tensor baseline, double[] scores, QualityOptions options, Random random)
    {
        int rows = (int)x.shape[0], columns = input.Columns, players = groups.Length, m = options.SensitivityPerturbations;
        if (m == 0)
            return (double.NaN, double.NaN, 0);
        var all = input.Inputs.detach();
        var halfWidth = (all.amax([0L]) - all.amin([0L])) * options.SensitivityRadius;
        var uniform = new float[(long)rows * m * columns];
        for (long i = 0; i < uniform.LongLength; i++)
            uniform[i] = (float)(2 * random.NextDouble() - 1);
        var row = torch.arange(rows, dtype: ScalarType.Int64).repeat_interleave(m);
        var y = x.index_select(0, row) + torch.tensor(uniform, [rows * m, columns]).to(x.dtype) * halfWidth.unsqueeze(0);
        var perturbedInput = new AttributionInput(input.Score, y, baseline.index_select(0, row), input.ChunkRows) { ColumnOwners = input.ColumnOwners, Entry = input.Entry };
        var perturbed = method.Attribute(perturbedInput);
        var perturbedScores = FeatureScores(perturbed.Scores, Enumerable.Range(0, rows * m).ToArray(), groups, columns);

        double sum = 0, relativeSum = 0;
        int relativeRows = 0;
        for (int r = 0; r < rows; r++)
        {
            double largest = 0;
            for (int j = 0; j < m; j++)
            {
                double squared = 0;
                for (int g = 0; g < players; g++)
                {
                    double d = perturbedScores[(r * m + j) * players + g] - scores[r * players + g];
                    squared += d * d;
                }
                largest = Math.Max(largest, Math.Sqrt(squared));
            }
            double norm = Math.Sqrt(Enumerable.Range(0, players).Sum(g => scores[r * players + g] * scores[r * players + g]));
            sum += largest;
            if (norm > 0)
            {
                relativeSum += largest / norm;
                relativeRows++;
            }
        }
        return (sum / rows, relativeRows > 0 ? relativeSum / relativeRows : double.NaN, perturbed.Evaluations);
    }

    // Feature scores (columns summed per group) of the chosen rows, row-major rows × groups.
    private static double[] FeatureScores(float[] columnScores, int[] rows, int[][] groups, int columns)
    {
        var result = new double[rows.Length * groups.Length];
        for (int i = 0; i < rows.Length; i++)
        {
            for (int g = 0; g < groups.Length; g++)
            {
                double total = 0;
                foreach (int c in groups[g])
                    total += columnScores[rows[i] * columns + c];
                result[i * groups.Length + g] = total;
            }
        }
        return result;
    }
}
