using System.Collections.Immutable;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// Exact Shapley values over feature groups by enumerating every coalition (Shapley 1953): φ_i = Σ_S |S|! (n − |S| − 1)! / n!
/// · (v(S ∪ {i}) − v(S)), where v(S) is F at the input for the features in S and at the baseline for the rest.
/// </summary>
/// <remarks>
/// Costs 2ⁿ model evaluations per row, so it accepts at most <see cref="MaximumFeatures"/> features; it is the
/// reference <see cref="ShapleySampling"/> converges to. Scores sum to F(x) − F(x′) per row (efficiency); the gaps are
/// returned. Within a group the score is spread evenly over its columns.
/// </remarks>
public sealed class ExactShapley : IAttributionMethod
{
    /// <summary>The most features (players) enumerated: 2¹² = 4096 coalitions per row.</summary>
    public const int MaximumFeatures = 12;

    /// <inheritdoc />
    public string Name => "shapley-exact";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; } = ImmutableSortedDictionary<string, string>.Empty;

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        Gradients.CheckChunk(input.ChunkRows);
        var groups = input.Groups();
        int rows = input.Rows, columns = input.Columns, players = groups.Length;
        if (players > MaximumFeatures)
            throw new DriftWatchException($"exact Shapley enumerates 2^features coalitions and takes at most {MaximumFeatures} features; got {players} — use shapley-sampling");
        int coalitions = 1 << players;
        using var scope = torch.NewDisposeScope();
        using var noGrad = torch.no_grad();
        var x = input.Inputs.detach();
        var baseline = input.BaselineRows().detach();
        var bitValue = torch.tensor(FeatureAblation.Owners(groups, columns).Select(o => 1L << (int)o).ToArray(), dtype: ScalarType.Int64);
        var values = new float[(long)coalitions * rows];

        // Expanded index i = coalition * rows + row; feature g is in the coalition when bit g of its number is set.
        long total = (long)coalitions * rows;
        for (long start = 0; start < total; start += input.ChunkRows)
        {
            using var chunk = torch.NewDisposeScope();
            long end = Math.Min(total, start + input.ChunkRows);
            var index = torch.arange(start, end, dtype: ScalarType.Int64);
            var row = HeldScalars.Remainder(index, rows);
            var coalition = HeldScalars.FloorDivide(index, rows);
            var on = HeldScalars.EqualTo(HeldScalars.Remainder(coalition.unsqueeze(1).div(bitValue.unsqueeze(0), rounding_mode: RoundingMode.floor), 2), 1);
            var points = torch.where(on, x.index_select(0, row), baseline.index_select(0, row));
            Gradients.CopyTo(input.Score(points), values, (int)start);
        }

        var weight = new double[players];
        for (int size = 0; size < players; size++)
            weight[size] = Factorial(size) * Factorial(players - size - 1) / Factorial(players);
        var phi = new double[rows * players];
        for (int coalition = 0; coalition < coalitions; coalition++)
        {
            int size = System.Numerics.BitOperations.PopCount((uint)coalition);
            for (int g = 0; g < players; g++)
            {
                if ((coalition & (1 << g)) != 0)
                    continue;
                int with = coalition | (1 << g);
                for (int r = 0; r < rows; r++)
                    phi[r * players + g] += weight[size] * ((double)values[(long)with * rows + r] - values[(long)coalition * rows + r]);
            }
        }
        var gaps = new float[rows];
        for (int r = 0; r < rows; r++)
            gaps[r] = values[(long)(coalitions - 1) * rows + r] - values[r];
        return new ColumnAttribution(rows, columns, ShapleySampling.Spread(phi, groups, rows, columns, 1.0), gaps, total);
    }

    private static double Factorial(int n)
    {
        double result = 1;
        for (int k = 2; k <= n; k++)
            result *= k;
        return result;
    }
}
