using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// Tensor operations with a number, keeping the number's <see cref="Scalar"/> alive until the native call returns.
/// TorchSharp turns a number into a <see cref="Scalar"/> temporary and hands the native call only its handle; a garbage
/// collection during the call can finalize the temporary while the kernel reads it ("Unknown scalar type"). Code that runs
/// per chunk uses these instead of operators or implicit conversions.
/// </summary>
internal static class HeldScalars
{
    /// <summary><paramref name="tensor"/> divided by <paramref name="divisor"/>, rounded down.</summary>
    public static Tensor FloorDivide(Tensor tensor, long divisor)
    {
        using var held = divisor.ToScalar();
        return tensor.div(held, rounding_mode: RoundingMode.floor);
    }

    /// <summary>The remainder of <paramref name="tensor"/> divided by <paramref name="divisor"/>.</summary>
    public static Tensor Remainder(Tensor tensor, long divisor)
    {
        using var held = divisor.ToScalar();
        return tensor.remainder(held);
    }

    /// <summary><paramref name="tensor"/> divided by <paramref name="divisor"/>.</summary>
    public static Tensor Divide(Tensor tensor, double divisor)
    {
        using var held = divisor.ToScalar();
        return tensor.div(held);
    }

    /// <summary><paramref name="tensor"/> times <paramref name="factor"/>.</summary>
    public static Tensor Multiply(Tensor tensor, double factor)
    {
        using var held = factor.ToScalar();
        return tensor.mul(held);
    }

    /// <summary><paramref name="tensor"/> plus <paramref name="value"/>.</summary>
    public static Tensor Add(Tensor tensor, long value)
    {
        using var held = value.ToScalar();
        return tensor.add(held);
    }

    /// <summary>Where <paramref name="tensor"/> equals <paramref name="value"/>.</summary>
    public static Tensor EqualTo(Tensor tensor, long value)
    {
        using var held = value.ToScalar();
        return tensor.eq(held);
    }

    /// <summary>Adds the rows of <paramref name="source"/> into <paramref name="target"/>'s rows named by <paramref name="index"/>, in place.</summary>
    public static Tensor IndexAdd(Tensor target, Tensor index, Tensor source)
    {
        using var one = 1.ToScalar();
        return target.index_add_(0, index, source, one);
    }

    /// <summary><paramref name="start"/> + <paramref name="a"/> × <paramref name="b"/>, element by element with broadcasting.</summary>
    public static Tensor AddProduct(Tensor start, Tensor a, Tensor b)
    {
        using var one = 1.ToScalar();
        return torch.addcmul(start, a, b, one);
    }
}
