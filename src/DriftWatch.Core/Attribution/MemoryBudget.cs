using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// Chooses how many expanded rows go through the model at once from a memory budget: a model whose rows are large (an
/// image model's feature maps) gets small blocks, a small tabular model keeps the row cap that suits its caches.
/// </summary>
/// <remarks>
/// The estimate runs the score step once on a few rows with a forward hook on every leaf submodule and adds up what they
/// return: the activations autograd keeps for the backward pass. The gradients flowing back are as large again, so a row
/// is taken to cost twice that, plus the row itself. Work the score step does outside submodules is not seen; a scripted
/// module runs no hooks, and then the cap alone decides.
/// </remarks>
public static class MemoryBudget
{
    /// <summary>The default budget for one block's forward and backward pass: 256 MiB.</summary>
    public const long DefaultBytes = 256L << 20;

    /// <summary>Rows the estimate runs the score step on.</summary>
    public const int SampleRows = 4;

    /// <summary>
    /// Bytes one expanded row is estimated to hold during a forward and backward pass of <paramref name="score"/> through
    /// <paramref name="module"/>, or 0 when no submodule output was seen or the score step failed (the attribution method
    /// that runs it next reports the failure).
    /// </summary>
    /// <param name="module">The module whose leaf submodules the score step calls.</param>
    /// <param name="score">Feature space to the attributed scalar per row.</param>
    /// <param name="features">Rows in feature space; the first <see cref="SampleRows"/> are used.</param>
    public static long BytesPerRow(nn.Module module, Func<Tensor, Tensor> score, Tensor features)
    {
        ArgumentNullException.ThrowIfNull(module);
        ArgumentNullException.ThrowIfNull(score);
        ArgumentNullException.ThrowIfNull(features);
        long rows = Math.Min(features.shape[0], SampleRows);
        if (rows == 0)
            return 0;
        long bytes = 0;
        var removers = new List<Action>();
        try
        {
            foreach (var (_, child) in module.named_modules())
            {
                if (child is nn.Module<Tensor, Tensor> leaf && !child.children().Any())
                {
                    var hook = leaf.register_forward_hook((_, _, output) =>
                    {
                        bytes += output.numel() * output.ElementSize;
                        return null!; // keep the output
                    });
                    removers.Add(hook.remove);
                }
            }
            using var scope = torch.NewDisposeScope();
            using var noGrad = torch.no_grad();
            score(features[TensorIndex.Slice(0, rows)]);
        }
        catch (Exception)
        {
            return 0; // a score step that fails is reported by the method that runs it, not by an estimate
        }
        finally
        {
            foreach (var remove in removers)
                remove();
        }
        return bytes == 0 ? 0 : (2 * bytes + rows * features.shape[1] * features.ElementSize) / rows;
    }

    /// <summary>
    /// Rows per block: as many as <paramref name="budgetBytes"/> holds at <paramref name="bytesPerRow"/>, at most
    /// <paramref name="cap"/> and at least 1; the cap when the cost of a row is unknown (0).
    /// </summary>
    public static int ChunkRows(long bytesPerRow, long budgetBytes, int cap)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(bytesPerRow);
        ArgumentOutOfRangeException.ThrowIfLessThan(budgetBytes, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(cap, 1);
        return bytesPerRow == 0 ? cap : (int)Math.Clamp(budgetBytes / bytesPerRow, 1, cap);
    }
}
