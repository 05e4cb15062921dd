using System.Runtime.InteropServices;

namespace DriftWatch.Storage;

/// <summary>Packs numeric arrays as little-endian bytes for storage.</summary>
public static class FloatBytes
{
    /// <summary>float32 array to bytes.</summary>
    public static byte[] FromFloats(ReadOnlySpan<float> values) => MemoryMarshal.AsBytes(values).ToArray();

    /// <summary>Bytes back to a float32 array.</summary>
    public static float[] ToFloats(byte[] bytes)
    {
        ArgumentNullException.ThrowIfNull(bytes);
        return MemoryMarshal.Cast<byte, float>(bytes).ToArray();
    }

    /// <summary>int64 array to bytes.</summary>
    public static byte[] FromLongs(ReadOnlySpan<long> values) => MemoryMarshal.AsBytes(values).ToArray();

    /// <summary>Bytes back to an int64 array.</summary>
    public static long[] ToLongs(byte[] bytes)
    {
        ArgumentNullException.ThrowIfNull(bytes);
        return MemoryMarshal.Cast<byte, long>(bytes).ToArray();
    }
}
