using DriftWatch.Attribution;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Attribution;

public sealed class TensorCopyTests
{
    // The reference is TorchSharp's own element accessor, data<T>(), which reads value by value through the tensor's
    // strides: the block copy must give the same row-major values for any layout and type.
    private static float[] Reference(Tensor t) => t.to(ScalarType.Float32).contiguous().data<float>().ToArray();

    [Fact]
    public void BlockCopyMatchesTheElementAccessorForEveryLayout()
    {
        using var scope = torch.NewDisposeScope();
        var square = torch.arange(0, 24, dtype: ScalarType.Float32).view(4, 6);
        var cases = new[]
        {
            square,                                  // contiguous
            square.t(),                              // transposed: strides swapped
            square[1..3],                            // a slice starting inside the storage
            square[.., 2..5],                        // a column slice: not contiguous
            square.to(ScalarType.Float64) * 0.5,     // another element type
            square.sum(dim: 1),                      // one dimension
        };
        foreach (var t in cases)
        {
            Assert.Equal(Reference(t), Gradients.ToArray(t));
            var target = new float[t.numel() + 3];
            Gradients.CopyTo(t, target, 2);
            Assert.Equal(Reference(t), target[2..^1]);
            Assert.Equal(0f, target[0]);
            Assert.Equal(0f, target[^1]);
        }
    }

    [Fact]
    public void AnEmptyTensorCopiesToAnEmptyArray()
    {
        using var scope = torch.NewDisposeScope();
        Assert.Empty(Gradients.ToArray(torch.zeros(0, 5)));
    }

    [Fact]
    public void CopyingLeavesTheSourceTensorAlive()
    {
        using var scope = torch.NewDisposeScope();
        var t = torch.ones(3, 2);
        _ = Gradients.ToArray(t);
        Assert.Equal(6f, t.sum().item<float>()); // ToArray's own scope must not dispose a tensor it did not create
    }
}
