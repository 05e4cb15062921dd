using System.Collections.Immutable;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// Feature ablation (occlusion of one feature at a time): a feature's score is F(x) − F(x with that feature's columns
/// set to the baseline); a categorical's whole embedding group is replaced at once. Needs no gradients.
/// </summary>
/// <remarks>
/// The ablated copies of several features go through the model together (<see cref="FeaturesPerPass"/> features × rows
/// per pass), cut into chunks of at most <see cref="AttributionInput.ChunkRows"/> rows. Within a group the score is
/// spread evenly over its columns, so summing columns into features gives the group's score; column-level scores inside a
/// group carry no meaning of their own. Ablation does not satisfy completeness, so no output gaps are returned.
/// </remarks>
public sealed class FeatureAblation : IAttributionMethod
{
    /// <summary>The largest <see cref="FeaturesPerPass"/> accepted.</summary>
    public const int MaximumFeaturesPerPass = 4096;

    /// <summary>Creates the method.</summary>
    /// <param name="featuresPerPass">How many features' ablated copies of the probe rows are evaluated in one pass (still cut at the chunk limit). Default 16.</param>
    public FeatureAblation(int featuresPerPass = 16)
    {
        if (featuresPerPass < 1 || featuresPerPass > MaximumFeaturesPerPass)
            throw new DriftWatchException($"features per pass must be between 1 and {MaximumFeaturesPerPass}; got {featuresPerPass}");
        FeaturesPerPass = featuresPerPass;
        Settings = MethodSettingsReader.Of(("features-per-pass", MethodSettingsReader.Text(featuresPerPass)));
    }

    /// <summary>Features ablated per pass through the model.</summary>
    public int FeaturesPerPass { get; }

    /// <inheritdoc />
    public string Name => "feature-ablation";

    /// <inheritdoc />
    public ImmutableSortedDictionary<string, string> Settings { get; }

    /// <summary>Rebuilds the method from stored settings (<c>features-per-pass</c>).</summary>
    public static FeatureAblation FromSettings(IReadOnlyDictionary<string, string> settings)
    {
        var read = new MethodSettingsReader("feature-ablation", settings);
        int perPass = read.Int("features-per-pass", 16, 1, MaximumFeaturesPerPass);
        read.RejectUnknown();
        return new FeatureAblation(perPass);
    }

    /// <inheritdoc />
    public ColumnAttribution Attribute(AttributionInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        Gradients.CheckChunk(input.ChunkRows);
        var groups = input.Groups();
        int rows = input.Rows, columns = input.Columns;
        using var scope = torch.NewDisposeScope();
        using var noGrad = torch.no_grad();
        var x = input.Inputs.detach();
        var baseline = input.BaselineRows().detach();
        var owners = torch.tensor(Owners(groups, columns), dtype: ScalarType.Int64);
        var atInput = Gradients.Scores(input.Score, x, input.ChunkRows);
        var ablated = new float[(long)groups.Length * rows];

        // Expanded index i = feature * rows + row within a pass, so a chunk holds consecutive rows of one or more features.
        for (int first = 0; first < groups.Length; first += FeaturesPerPass)
        {
            int count = Math.Min(FeaturesPerPass, groups.Length - first);
            long total = (long)count * rows;
            for (long start = 0; start < total; start += input.ChunkRows)
            {
                using var chunk = torch.NewDisposeScope();
                long end = Math.Min(total, start + input.ChunkRows);
                var index = torch.arange(start, end, dtype: ScalarType.Int64);
                var row = HeldScalars.Remainder(index, rows);
                var feature = HeldScalars.Add(HeldScalars.FloorDivide(index, rows), first);
                var off = owners.unsqueeze(0).eq(feature.unsqueeze(1));
                var points = torch.where(off, baseline.index_select(0, row), x.index_select(0, row));
                Gradients.CopyTo(input.Score(points), ablated, (int)((long)first * rows + start));
            }
        }

        var scores = new float[rows * columns];
        for (int g = 0; g < groups.Length; g++)
        {
            float share = 1f / groups[g].Length;
            for (int r = 0; r < rows; r++)
            {
                float change = atInput[r] - ablated[(long)g * rows + r];
                foreach (int c in groups[g])
                    scores[r * columns + c] = change * share;
            }
        }
        return new ColumnAttribution(rows, columns, scores, null, rows + (long)groups.Length * rows);
    }

    /// <summary>The owner of every column as a flat array (the identity when each column is its own group).</summary>
    internal static long[] Owners(int[][] groups, int columns)
    {
        var owners = new long[columns];
        for (int g = 0; g < groups.Length; g++)
        {
            foreach (int c in groups[g])
                owners[c] = g;
        }
        return owners;
    }
}
