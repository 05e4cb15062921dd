using System.Collections.Immutable;
using System.Globalization;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// Integrated Gradients (Sundararajan, Taly, Yan 2017) that spends model evaluations only where they are needed:
/// every row is integrated with a few midpoint steps; while the mean convergence delta is above the target, the rows
/// with the largest deltas are integrated again with twice the steps, up to a ceiling.
/// </summary>
/// <remarks>
/// The target is the one the monitor checks: mean over rows of |Σ attributions − (F(x) − F(x′))| at most
/// <see cref="Tolerance"/> × mean over rows of |F(x) − F(x′)|. Each round refines the rows with the largest deltas, only as
/// many as should close the gap to the target. The midpoint rule is used because a ReLU network's path gradient is piecewise
/// constant, where Gauss–Legendre nodes lose their advantage. Every row's delta is recorded as usual.
/// </remarks>
public sealed class AdaptiveIntegratedGradients : IAttributionMethod
{
    /// <summary>Creates the method.</summary>
    /// <param name="initialSteps">Midpoint steps every row starts with. Default 16.</param>
    /// <param name="maximumSteps">The ceiling on steps per row. Default 256.</param>
    /// <param name="tolerance">Target mean convergence delta as a fraction of the mean |F(x) − F(x′)|. Default 0.01.</param>
    public AdaptiveIntegratedGradients(int initialSteps = 16, int maximumSteps = 256, double tolerance = 0.01)
    {
        if (initialSteps < 1 || initialSteps > maximumSteps || maximumSteps > 4096)
            throw new DriftWatchException($"adaptive steps must satisfy 1 ≤ initial ≤ maximum ≤ 4096; got initial {initialSteps}, maximum {maximumSteps}");
        if (!(tolerance > 0 && tolerance < 1))
            throw new DriftWatchException($"adaptive tolerance must be between 0 and 1; got {tolerance}");
        InitialSteps = initialSteps;
        MaximumSteps = maximumSteps;
        Tolerance = tolerance;
        Settings = ImmutableSortedDictionary.CreateRange(
        [
            KeyValuePair.Create("initial-steps", initialSteps.ToString(CultureInfo.InvariantCulture)),
            KeyValuePair.Create("maximum-steps", maximumSteps.ToString(CultureInfo.InvariantCulture)),
            KeyValuePair.Create("quadrature", nameof(QuadratureRule.RiemannMidpoint)),
            KeyValuePair.Create("tolerance", tolerance.ToString("R", CultureInfo.InvariantCulture)),
        ]);
    }

    /// <summary>Steps every row starts with.</summary>
    public int InitialSteps { get; }

    /// <summary>The ceiling on steps per row.</summary>
    public int MaximumSteps { get; }

    /// <summary>Target mean convergence delta, as a fraction of the mean output gap.</summary>
    public double Tolerance { get; }

    /// <inheritdoc />
    public string Name => "integrated-gradients-adaptive";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; }

    /// <summary>Model evaluations each row received in the last call (for benchmarks and reports).</summary>
    public ImmutableArray<int> LastStepsPerRow { get; private set; } = [];

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        Gradients.CheckChunk(input.ChunkRows);
        int rows = input.Rows, columns = input.Columns;
        var scores = new float[rows * columns];
        var steps = new int[rows];
        var (gaps, evaluations) = Gradients.OutputGaps(input); // F(x) and F(x′) once, for the convergence test
        double typical = gaps.Average(g => Math.Abs((double)g));

        var pending = Enumerable.Range(0, rows).ToArray();
        var deltas = new double[rows];
        for (int n = InitialSteps; pending.Length > 0; n = Math.Min(MaximumSteps, n * 2))
        {
            using (var scope = torch.NewDisposeScope())
            {
                var index = torch.tensor(pending.Select(r => (long)r).ToArray());
                var subset = input with
                {
                    Inputs = input.Inputs.index_select(0, index),
                    Baseline = input.BaselineRows().index_select(0, index),
                };
                var result = new IntegratedGradients(n, QuadratureRule.RiemannMidpoint).Integrate(subset);
                evaluations += (long)pending.Length * n;
                for (int i = 0; i < pending.Length; i++)
                {
                    int r = pending[i];
                    double sum = 0;
                    for (int c = 0; c < columns; c++)
                    {
                        float v = result[i * columns + c];
                        scores[r * columns + c] = v;
                        sum += v;
                    }
                    steps[r] = n;
                    deltas[r] = Math.Abs(sum - gaps[r]);
                }
            }
            if (n >= MaximumSteps || deltas.Average() <= Tolerance * typical)
                break;
            // Worst rows first, only as many as needed: doubling the steps is assumed to halve a row's delta
            // (the midpoint rule's error falls at least as 1/n where the path crosses ReLU kinks).
            double excess = deltas.Sum() - Tolerance * typical * rows;
            var chosen = new List<int>();
            foreach (int r in Enumerable.Range(0, rows).Where(r => steps[r] == n).OrderByDescending(r => deltas[r]))
            {
                if (excess <= 0)
                    break;
                chosen.Add(r);
                excess -= deltas[r] / 2;
            }
            pending = [.. chosen];
        }
        LastStepsPerRow = [.. steps];
        return new ColumnAttribution(rows, columns, scores, gaps, evaluations);
    }
}
