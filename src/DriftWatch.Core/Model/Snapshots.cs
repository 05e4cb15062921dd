using System.Collections.Immutable;
using System.Runtime.InteropServices;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Model;

/// <summary>One tensor of a weight snapshot: its state name, element type and shape.</summary>
/// <param name="Name">The parameter or buffer name, e.g. <c>_scorer.0.weight</c>.</param>
/// <param name="Type">The element type.</param>
/// <param name="Shape">The shape.</param>
public sealed record SnapshotEntry(string Name, ScalarType Type, ImmutableArray<long> Shape)
{
    /// <summary>The shape as text, e.g. <c>[64, 48]</c>.</summary>
    public string ShapeText => "[" + string.Join(", ", Shape) + "]";
}

/// <summary>Reads the weight snapshots the monitor stores (a module's <c>save</c> format) and loads them into a rebuilt model.</summary>
public static class Snapshots
{
    /// <summary>The entries of a snapshot, without loading any weights; the stream is read to its end.</summary>
    /// <exception cref="DriftWatchException">The bytes are not a weight snapshot (truncated or foreign).</exception>
    public static IReadOnlyList<SnapshotEntry> ReadEntries(Stream snapshot)
    {
        ArgumentNullException.ThrowIfNull(snapshot);
        var entries = new List<SnapshotEntry>();
        try
        {
            using var reader = new BinaryReader(snapshot, System.Text.Encoding.UTF8, leaveOpen: true);
            long count = Decode(reader);
            if (count < 0 || count > 1_000_000)
                throw new DriftWatchException($"weight snapshot claims {count} tensors; it is damaged or not a snapshot");
            for (long i = 0; i < count; i++)
            {
                string name = reader.ReadString();
                var type = (ScalarType)Decode(reader);
                long dimensions = Decode(reader);
                if (dimensions < 0 || dimensions > 64)
                    throw new DriftWatchException($"weight snapshot entry '{name}' claims {dimensions} dimensions; the snapshot is damaged");
                var shape = new long[dimensions];
                for (int d = 0; d < dimensions; d++)
                    shape[d] = Decode(reader);
                long elements = shape.Aggregate(1L, (a, b) => a * b);
                long bytes = elements * ElementSize(type, name);
                if (snapshot.CanSeek)
                {
                    if (snapshot.Position + bytes > snapshot.Length)
                        throw new EndOfStreamException();
                    snapshot.Seek(bytes, SeekOrigin.Current);
                }
                else
                {
                    reader.ReadBytes(checked((int)bytes));
                }
                entries.Add(new SnapshotEntry(name, type, ImmutableCollectionsMarshal.AsImmutableArray(shape)));
            }
        }
        catch (EndOfStreamException e)
        {
            throw new DriftWatchException("weight snapshot ends early; it was truncated", e);
        }
        return entries;
    }

    /// <summary>
    /// Loads a snapshot into <paramref name="module"/> after checking that every tensor's name, type and shape match the module's
    /// state; a mismatch names the first parameter that does not fit.
    /// </summary>
    /// <param name="module">The rebuilt module.</param>
    /// <param name="snapshot">The snapshot bytes, positioned at the start and seekable.</param>
    /// <param name="describe">What the snapshot is, for messages, e.g. <c>snapshot of epoch 3</c>.</param>
    /// <exception cref="DriftWatchException">The snapshot does not fit the module; the message names the first mismatched parameter.</exception>
    public static void LoadInto(nn.Module module, Stream snapshot, string describe)
    {
        ArgumentNullException.ThrowIfNull(module);
        ArgumentNullException.ThrowIfNull(snapshot);
        if (!snapshot.CanSeek)
            throw new ArgumentException("the snapshot stream must be seekable", nameof(snapshot));
        long start = snapshot.Position;
        CheckFit(module, snapshot, describe);
        snapshot.Position = start;
        using var reader = new BinaryReader(snapshot, System.Text.Encoding.UTF8, leaveOpen: true);
        module.load(reader, strict: true);
    }

    /// <summary>Checks that every tensor of a snapshot matches <paramref name="module"/>'s state by name, type and shape, without loading it.</summary>
    /// <exception cref="DriftWatchException">The snapshot does not fit the module; the message names the first mismatched parameter.</exception>
    public static void CheckFit(nn.Module module, Stream snapshot, string describe)
    {
        ArgumentNullException.ThrowIfNull(module);
        ArgumentNullException.ThrowIfNull(snapshot);
        var stored = ReadEntries(snapshot);
        var state = module.state_dict();
        var expected = state.Select(kv => new SnapshotEntry(kv.Key, kv.Value.dtype, ImmutableCollectionsMarshal.AsImmutableArray(kv.Value.shape))).ToList();
        var byName = stored.ToDictionary(e => e.Name, StringComparer.Ordinal);
        foreach (var wanted in expected)
        {
            if (!byName.TryGetValue(wanted.Name, out var found))
                throw new DriftWatchException($"{describe} does not fit the rebuilt model: its parameter '{wanted.Name}' {wanted.ShapeText} is not in the snapshot; the snapshot has {stored.Count} tensors ({Preview(stored)}) — the model's settings differ from the trained one's");
            if (found.Type != wanted.Type || !found.Shape.SequenceEqual(wanted.Shape))
                throw new DriftWatchException($"{describe} does not fit the rebuilt model: parameter '{wanted.Name}' is {found.Type} {found.ShapeText} in the snapshot but {wanted.Type} {wanted.ShapeText} in the model — the model's settings differ from the trained one's");
        }
        var extra = stored.FirstOrDefault(e => !state.ContainsKey(e.Name));
        if (extra is not null)
            throw new DriftWatchException($"{describe} does not fit the rebuilt model: the snapshot's parameter '{extra.Name}' {extra.ShapeText} has no counterpart in the model");
    }

    private static string Preview(IReadOnlyList<SnapshotEntry> entries) =>
        string.Join(", ", entries.Take(3).Select(e => $"'{e.Name}' {e.ShapeText}")) + (entries.Count > 3 ? ", …" : "");

    // Unsigned LEB128, as the module save format writes its counts, types and dimensions.
    private static long Decode(BinaryReader reader)
    {
        long value = 0;
        for (int shift = 0; shift < 64; shift += 7)
        {
            byte b = reader.ReadByte();
            value |= (long)(b & 0x7F) << shift;
            if ((b & 0x80) == 0)
                return value;
        }
        throw new DriftWatchException("weight snapshot has a malformed number; it is damaged");
    }

    private static long ElementSize(ScalarType type, string name)
    {
        try
        {
            using var probe = torch.empty(1, dtype: type);
            return probe.ElementSize;
        }
        catch (Exception e) when (e is ArgumentException or NotImplementedException or InvalidOperationException or ExternalException)
        {
            throw new DriftWatchException($"weight snapshot entry '{name}' has element type {(int)type}, which this version cannot read; the snapshot is damaged or foreign", e);
        }
    }
}
