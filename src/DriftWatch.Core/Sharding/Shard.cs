using System.Globalization;

namespace DriftWatch.Sharding;

/// <summary>One of <see cref="Count"/> deterministic slices of a job's work (epochs to re-attribute, runs to evaluate), written <c>K/N</c>.</summary>
/// <remarks>
/// Shard K of N takes the contiguous block of items from ⌊K·M/N⌋ up to ⌊(K+1)·M/N⌋ of the job's M items in their fixed
/// order, so block sizes differ by at most one, every item belongs to exactly one shard, and any shard can be run
/// again alone. Shard numbers start at 0, like a Slurm array started with <c>--array=0-(N-1)</c>.
/// </remarks>
/// <param name="Index">K, from 0 to <paramref name="Count"/> − 1.</param>
/// <param name="Count">N, the number of shards, from 1 to <see cref="MaximumCount"/>.</param>
public readonly record struct Shard(int Index, int Count)
{
    /// <summary>The most shards a job may be split into.</summary>
    public const int MaximumCount = 100_000;

    /// <summary>The whole job as one shard (0/1).</summary>
    public static Shard Whole => new(0, 1);

    /// <summary>The file or folder name of this shard's output: <c>shard-K-of-N</c>.</summary>
    public string Name => string.Create(CultureInfo.InvariantCulture, $"shard-{Index}-of-{Count}");

    /// <summary>Parses <c>K/N</c>.</summary>
    /// <param name="text">The text, e.g. <c>2/4</c>.</param>
    /// <param name="option">The option's name for the message, e.g. <c>--shard</c>.</param>
    /// <exception cref="DriftWatchException">Not K/N with 0 ≤ K &lt; N ≤ <see cref="MaximumCount"/>.</exception>
    public static Shard Parse(string text, string option = "--shard")
    {
        ArgumentNullException.ThrowIfNull(text);
        string problem = $"{option} must be K/N with whole numbers 0 ≤ K < N ≤ {MaximumCount}, e.g. 2/4 for the third of four shards; got '{text}'";
        var parts = text.Split('/');
        if (parts.Length != 2
            || !int.TryParse(parts[0].Trim(), NumberStyles.None, CultureInfo.InvariantCulture, out int index)
            || !int.TryParse(parts[1].Trim(), NumberStyles.None, CultureInfo.InvariantCulture, out int count)
            || count < 1 || count > MaximumCount || index >= count)
        {
            throw new DriftWatchException(problem);
        }
        return new Shard(index, count);
    }

    /// <summary>The first item and the number of items this shard takes out of <paramref name="items"/>.</summary>
    public (int Start, int Length) Range(int items)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(items);
        if (Count < 1 || Index < 0 || Index >= Count)
            throw new InvalidOperationException($"shard {Index}/{Count} is not valid");
        int start = (int)((long)Index * items / Count);
        int end = (int)((long)(Index + 1) * items / Count);
        return (start, end - start);
    }

    /// <summary>This shard's items, in their order.</summary>
    public IReadOnlyList<T> Slice<T>(IReadOnlyList<T> items)
    {
        ArgumentNullException.ThrowIfNull(items);
        var (start, length) = Range(items.Count);
        return items.Skip(start).Take(length).ToList();
    }

    /// <summary><c>K/N</c>.</summary>
    public override string ToString() => string.Create(CultureInfo.InvariantCulture, $"{Index}/{Count}");

    /// <summary>A list of epochs as short text: runs of consecutive numbers as <c>A..B</c>, e.g. <c>0..4, 7, 9..12</c>.</summary>
    public static string Describe(IEnumerable<int> numbers)
    {
        ArgumentNullException.ThrowIfNull(numbers);
        var sorted = numbers.Distinct().Order().ToList();
        if (sorted.Count == 0)
            return "none";
        var parts = new List<string>();
        int first = sorted[0], last = sorted[0];
        foreach (int n in sorted.Skip(1).Append(int.MinValue))
        {
            if (n == last + 1 && n != int.MinValue)
            {
                last = n;
                continue;
            }
            parts.Add(first == last ? first.ToString(CultureInfo.InvariantCulture)
                : last == first + 1 ? string.Create(CultureInfo.InvariantCulture, $"{first}, {last}")
                : string.Create(CultureInfo.InvariantCulture, $"{first}..{last}"));
            first = last = n;
        }
        return string.Join(", ", parts);
    }
}
