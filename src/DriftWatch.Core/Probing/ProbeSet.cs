using System.Buffers.Binary;
using System.Collections.Immutable;
using System.Security.Cryptography;

namespace DriftWatch.Probing;

/// <summary>Which part of the probe set a row belongs to.</summary>
public enum ProbeHalf
{
    /// <summary>Rows the model never trains on.</summary>
    HeldOut = 0,

    /// <summary>Rows from the training set.</summary>
    Training = 1,
}

/// <summary>
/// The fixed rows attributed at every epoch, in two halves kept apart: held-out rows first, then training rows.
/// Identified by a SHA-256 content hash of every row, label and half marker.
/// </summary>
public sealed class ProbeSet
{
    /// <summary>Creates a probe set from the two halves as given (no selection).</summary>
    public ProbeSet(ProbeRows heldOut, ProbeRows training)
    {
        ArgumentNullException.ThrowIfNull(heldOut);
        ArgumentNullException.ThrowIfNull(training);
        if (heldOut.Count == 0 || training.Count == 0)
            throw new DriftWatchException($"probe set needs rows in both halves; got {heldOut.Count} held-out and {training.Count} training rows");
        Rows = ProbeRows.Concat(heldOut, training);
        HeldOutCount = heldOut.Count;
        TrainingCount = training.Count;
        Hash = ComputeHash(Rows, HeldOutCount);
    }

    private ProbeSet(ProbeRows heldOut, ProbeRows training, SplitCheckResult? splitCheck, ImmutableArray<ImmutableDictionary<long, int>> trainingValueCounts)
        : this(heldOut, training)
    {
        SplitCheck = splitCheck;
        TrainingValueCounts = trainingValueCounts;
    }

    /// <summary>
    /// The split-consistency check of every training and held-out row <see cref="Select(ProbeRows, ProbeRows, int, int, SplitCheckOptions)"/>
    /// was given; null for a probe set built from its halves alone, or when the rows could not be checked (no labels, too few rows).
    /// </summary>
    public SplitCheckResult? SplitCheck { get; }

    /// <summary>
    /// Per raw categorical input (in the schema's categorical order), how many of all the training rows given to
    /// <see cref="Select(ProbeRows, ProbeRows, int, int)"/> carry each value; empty for a probe set built from its halves alone.
    /// </summary>
    public ImmutableArray<ImmutableDictionary<long, int>> TrainingValueCounts { get; } = [];

    /// <summary>All rows, held-out half first.</summary>
    public ProbeRows Rows { get; }

    /// <summary>Rows in the held-out half (they come first).</summary>
    public int HeldOutCount { get; }

    /// <summary>Rows in the training half (they follow the held-out half).</summary>
    public int TrainingCount { get; }

    /// <summary>Total rows.</summary>
    public int Count => HeldOutCount + TrainingCount;

    /// <summary>Lowercase hex SHA-256 over the rows, labels and halves.</summary>
    public string Hash { get; }

    /// <summary>The half of row <paramref name="row"/>.</summary>
    public ProbeHalf HalfOf(int row) => row < HeldOutCount ? ProbeHalf.HeldOut : ProbeHalf.Training;

    /// <summary>The half of every row, as bytes (0 held-out, 1 training), for storage.</summary>
    public byte[] HalfMarkers()
    {
        var markers = new byte[Count];
        Array.Fill(markers, (byte)ProbeHalf.Training, HeldOutCount, TrainingCount);
        return markers;
    }

    /// <summary>
    /// Chooses <paramref name="perHalf"/> rows from each source by seed, stratified by label when labels are given
    /// (each label value keeps its share of the source, rounded), and keeps them apart as two halves. Reads every row given
    /// once more: the split-consistency check (<see cref="SplitCheck"/>, default options) and each categorical's training
    /// rows per value (<see cref="TrainingValueCounts"/>).
    /// </summary>
    /// <param name="heldOut">Rows the model does not train on.</param>
    /// <param name="training">Rows from the training set.</param>
    /// <param name="perHalf">Rows to take from each source; a source with fewer rows gives all of them. Default in callers: 128.</param>
    /// <param name="seed">Seed of the choice; the same seed and rows give the same probe set.</param>
    public static ProbeSet Select(ProbeRows heldOut, ProbeRows training, int perHalf, int seed) =>
        Select(heldOut, training, perHalf, seed, SplitCheckOptions.Default);

    /// <summary>As <see cref="Select(ProbeRows, ProbeRows, int, int)"/>, with the split-consistency check's options given.</summary>
    /// <param name="heldOut">Rows the model does not train on.</param>
    /// <param name="training">Rows from the training set.</param>
    /// <param name="perHalf">Rows to take from each source; a source with fewer rows gives all of them.</param>
    /// <param name="seed">Seed of the choice; the same seed and rows give the same probe set.</param>
    /// <param name="check">How the split-consistency check runs.</param>
    public static ProbeSet Select(ProbeRows heldOut, ProbeRows training, int perHalf, int seed, SplitCheckOptions check)
    {
        ArgumentNullException.ThrowIfNull(heldOut);
        ArgumentNullException.ThrowIfNull(training);
        ArgumentNullException.ThrowIfNull(check);
        if (perHalf < 1)
            throw new DriftWatchException($"probe rows per half must be at least 1; got {perHalf}");
        if (heldOut.DenseCount != training.DenseCount || heldOut.CategoricalCount != training.CategoricalCount)
            throw new DriftWatchException("probe halves must have the same number of dense and categorical inputs");
        return new ProbeSet(
            heldOut.Take(Choose(heldOut, perHalf, seed)),
            training.Take(Choose(training, perHalf, unchecked(seed * 31 + 17))),
            Probing.SplitCheck.Run(heldOut, training, check),
            CountValues(training));
    }

    private static ImmutableArray<ImmutableDictionary<long, int>> CountValues(ProbeRows training)
    {
        var counts = new ImmutableDictionary<long, int>[training.CategoricalCount];
        for (int c = 0; c < training.CategoricalCount; c++)
        {
            var values = new Dictionary<long, int>();
            for (int r = 0; r < training.Count; r++)
            {
                long v = training.Categorical[r * training.CategoricalCount + c];
                values[v] = values.GetValueOrDefault(v) + 1;
            }
            counts[c] = values.ToImmutableDictionary();
        }
        return [.. counts];
    }

    internal static int[] Choose(ProbeRows source, int count, int seed)
    {
        var random = new Random(seed);
        if (count >= source.Count)
            return Enumerable.Range(0, source.Count).ToArray();
        if (source.Labels is null)
            return Shuffled(Enumerable.Range(0, source.Count).ToArray(), random).Take(count).Order().ToArray();

        // Stratify: largest-remainder allocation of the count over label values, in label order.
        var groups = Enumerable.Range(0, source.Count)
            .GroupBy(r => source.Labels[r])
            .OrderBy(g => g.Key)
            .Select(g => g.ToArray())
            .ToArray();
        var exact = groups.Select(g => (double)count * g.Length / source.Count).ToArray();
        var take = exact.Select(e => (int)Math.Floor(e)).ToArray();
        int missing = count - take.Sum();
        foreach (int g in Enumerable.Range(0, groups.Length).OrderByDescending(g => exact[g] - take[g]).ThenBy(g => g).Take(missing))
            take[g]++;
        var chosen = new List<int>(count);
        for (int g = 0; g < groups.Length; g++)
            chosen.AddRange(Shuffled(groups[g], random).Take(take[g]));
        chosen.Sort();
        return [.. chosen];
    }

    private static int[] Shuffled(int[] items, Random random)
    {
        var copy = (int[])items.Clone();
        random.Shuffle(copy);
        return copy;
    }

    private static string ComputeHash(ProbeRows rows, int heldOutCount)
    {
        using var sha = IncrementalHash.CreateHash(HashAlgorithmName.SHA256);
        var word = new byte[8];
        void Int(long v)
        {
            BinaryPrimitives.WriteInt64LittleEndian(word, v);
            sha.AppendData(word);
        }
        Int(rows.Count);
        Int(heldOutCount);
        Int(rows.DenseCount);
        Int(rows.CategoricalCount);
        foreach (float v in rows.Dense)
            Int(BitConverter.SingleToInt32Bits(v));
        foreach (long v in rows.Categorical)
            Int(v);
        Int(rows.Labels is null ? 0 : 1);
        foreach (float v in rows.Labels ?? [])
            Int(BitConverter.SingleToInt32Bits(v));
        return Convert.ToHexStringLower(sha.GetHashAndReset());
    }
}
