using System.Collections.Immutable;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// Shapley value sampling over feature groups (Castro, Gómez, Tejada 2009): the mean, over random orderings of the
/// features, of each feature's marginal contribution F(with it) − F(without it) as features are switched from the
/// baseline to the input one by one; a categorical's embedding group switches as one player.
/// </summary>
/// <remarks>
/// Each ordering's contributions telescope to F(x) − F(x′), so every row's scores sum to it up to rounding
/// (efficiency); the gaps are returned for the stored convergence delta. The orderings are drawn once from
/// <see cref="Seed"/> and shared by every row; with <see cref="Antithetic"/> each ordering is followed by its reverse,
/// which lowers the variance. All orderings × (features − 1) × rows intermediate points go through the model as one
/// expanded batch cut into chunks of at most <see cref="AttributionInput.ChunkRows"/> rows. Within a group the score is
/// spread evenly over its columns. For few features, <see cref="ExactShapley"/> gives the exact values.
/// </remarks>
public sealed class ShapleySampling : IAttributionMethod
{
    /// <summary>The largest number of orderings accepted.</summary>
    public const int MaximumPermutations = 100_000;

    /// <summary>Creates the method.</summary>
    /// <param name="permutations">Orderings sampled. Default 32; must be even with <paramref name="antithetic"/>.</param>
    /// <param name="antithetic">Follow each sampled ordering by its reverse. Default true.</param>
    /// <param name="seed">Seed of the orderings. Default 0.</param>
    public ShapleySampling(int permutations = 32, bool antithetic = true, int seed = 0)
    {
        if (permutations < 1 || permutations > MaximumPermutations)
            throw new DriftWatchException($"permutations must be between 1 and {MaximumPermutations}; got {permutations}");
        if (antithetic && permutations % 2 != 0)
            throw new DriftWatchException($"permutations must be even with antithetic sampling (each ordering comes with its reverse); got {permutations}");
        Permutations = permutations;
        Antithetic = antithetic;
        Seed = seed;
        Settings = MethodSettingsReader.Of(
            ("permutations", MethodSettingsReader.Text(permutations)),
            ("antithetic", MethodSettingsReader.Text(antithetic)),
            ("seed", MethodSettingsReader.Text(seed)));
    }

    /// <summary>Orderings sampled.</summary>
    public int Permutations { get; }

    /// <summary>Whether each ordering is followed by its reverse.</summary>
    public bool Antithetic { get; }

    /// <summary>Seed of the orderings.</summary>
    public int Seed { get; }

    /// <inheritdoc />
    public string Name => "shapley-sampling";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; }

    /// <summary>Rebuilds the method from stored settings (<c>permutations</c>, <c>antithetic</c>, <c>seed</c>).</summary>
    public static ShapleySampling FromSettings(IReadOnlyDictionary<string, string> settings)
    {
        var read = new MethodSettingsReader("shapley-sampling", settings);
        int permutations = read.Int("permutations", 32, 1, MaximumPermutations);
        bool antithetic = read.Bool("antithetic", true);
        int seed = read.Int("seed", 0, int.MinValue, int.MaxValue);
        read.RejectUnknown();
        return new ShapleySampling(permutations, antithetic, seed);
    }

    /// <summary>The orderings of <paramref name="players"/> features this method uses, in order.</summary>
    public int[][] Orderings(int players)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(players);
        var random = new Random(Seed);
        var orderings = new List<int[]>(Permutations);
        while (orderings.Count < Permutations)
        {
            var order = Enumerable.Range(0, players).ToArray();
            random.Shuffle(order);
            orderings.Add(order);
            if (Antithetic)
                orderings.Add(order.Reverse().ToArray());
        }
        return [.. orderings];
    }

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        Gradients.CheckChunk(input.ChunkRows);
        var groups = input.Groups();
        int rows = input.Rows, columns = input.Columns, players = groups.Length;
        var orderings = Orderings(players);
        using var scope = torch.NewDisposeScope();
        using var noGrad = torch.no_grad();
        var x = input.Inputs.detach();
        var baseline = input.BaselineRows().detach();
        var atInput = Gradients.Scores(input.Score, x, input.ChunkRows);
        var atBaseline = Gradients.Scores(input.Score, baseline, input.ChunkRows);

        // position[p, g]: where feature g comes in ordering p. Point (p, k) has the first k features of ordering p
        // switched on, k = 1 … players − 1 (k = 0 is the baseline, k = players the input; both computed once above).
        int inner = Math.Max(0, players - 1);
        var position = new long[orderings.Length * players];
        for (int p = 0; p < orderings.Length; p++)
        {
            for (int k = 0; k < players; k++)
                position[p * players + orderings[p][k]] = k;
        }
        var values = new float[(long)orderings.Length * inner * rows];
        if (inner > 0)
        {
            var positions = torch.tensor(position, [orderings.Length, players]);
            var owners = torch.tensor(FeatureAblation.Owners(groups, columns), dtype: ScalarType.Int64);
            long total = (long)orderings.Length * inner * rows;
            for (long start = 0; start < total; start += input.ChunkRows)
            {
                using var chunk = torch.NewDisposeScope();
                long end = Math.Min(total, start + input.ChunkRows);
                var index = torch.arange(start, end, dtype: ScalarType.Int64);
                var row = HeldScalars.Remainder(index, rows);
                var point = HeldScalars.FloorDivide(index, rows);
                var ordering = HeldScalars.FloorDivide(point, inner);
                var switchedOn = HeldScalars.Add(HeldScalars.Remainder(point, inner), 1);
                var columnPosition = positions.index_select(0, ordering).index_select(1, owners);
                var on = columnPosition.lt(switchedOn.unsqueeze(1));
                var points = torch.where(on, x.index_select(0, row), baseline.index_select(0, row));
                Gradients.CopyTo(input.Score(points), values, (int)start);
            }
        }

        // Marginal of the feature at position k of ordering p: v(k + 1) − v(k), v(0) = F(x′), v(players) = F(x).
        var phi = new double[rows * players];
        for (int p = 0; p < orderings.Length; p++)
        {
            for (int r = 0; r < rows; r++)
            {
                double previous = atBaseline[r];
                for (int k = 0; k < players; k++)
                {
                    double next = k == players - 1 ? atInput[r] : values[((long)p * inner + k) * rows + r];
                    phi[r * players + orderings[p][k]] += next - previous;
                    previous = next;
                }
            }
        }
        var scores = Spread(phi, groups, rows, columns, 1.0 / orderings.Length);
        var gaps = new float[rows];
        for (int r = 0; r < rows; r++)
            gaps[r] = atInput[r] - atBaseline[r];
        return new ColumnAttribution(rows, columns, scores, gaps, 2L * rows + (long)orderings.Length * inner * rows);
    }

    /// <summary>Feature scores (row-major rows × groups, times <paramref name="scale"/>) spread evenly over each group's columns.</summary>
    internal static float[] Spread(double[] features, int[][] groups, int rows, int columns, double scale)
    {
        var scores = new float[rows * columns];
        for (int r = 0; r < rows; r++)
        {
            for (int g = 0; g < groups.Length; g++)
            {
                double share = features[r * groups.Length + g] * scale / groups[g].Length;
                foreach (int c in groups[g])
                    scores[r * columns + c] = (float)share;
            }
        }
        return scores;
    }
}
