using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>Chunked evaluation helpers shared by the gradient methods.</summary>
internal static class Gradients
{
    /// <summary>Gradient of the summed score with respect to <paramref name="points"/> (one chunk).</summary>
    public static Tensor Of(Func<Tensor, Tensor> score, Tensor points)
    {
        using var enabled = torch.enable_grad();
        var leaf = points.detach().requires_grad_(true);
        var output = score(leaf);
        return torch.autograd.grad([output.sum()], [leaf])[0];
    }

    /// <summary>The score of every row, evaluated in chunks without building a graph.</summary>
    public static float[] Scores(Func<Tensor, Tensor> score, Tensor rows, int chunkRows)
    {
        long n = rows.shape[0];
        var result = new float[n];
        using var noGrad = torch.no_grad();
        for (long start = 0; start < n; start += chunkRows)
        {
            using var scope = torch.NewDisposeScope();
            long end = Math.Min(n, start + chunkRows);
            var values = score(rows[TensorIndex.Slice(start, end)]).to(ScalarType.Float32).contiguous();
            values.data<float>().CopyTo(result, (int)start);
        }
        return result;
    }

    /// <summary>Gradient at every row, evaluated in chunks; <c>[rows, columns]</c> owned by the caller's scope.</summary>
    public static Tensor AtRows(Func<Tensor, Tensor> score, Tensor rows, int chunkRows)
    {
        long n = rows.shape[0];
        var gradient = torch.empty_like(rows);
        for (long start = 0; start < n; start += chunkRows)
        {
            using var scope = torch.NewDisposeScope();
            long end = Math.Min(n, start + chunkRows);
            gradient[TensorIndex.Slice(start, end)] = Of(score, rows[TensorIndex.Slice(start, end)]);
        }
        return gradient;
    }

    /// <summary>
    /// F(x) − F(x′) per row and the model evaluations it took: a baseline shared by every row (<c>[columns]</c>) is
    /// evaluated once, not once per row.
    /// </summary>
    public static (float[] Gaps, long Evaluations) OutputGaps(AttributionInput input)
    {
        using var scope = torch.NewDisposeScope();
        var atInput = Scores(input.Score, input.Inputs.detach(), input.ChunkRows);
        bool shared = input.Baseline.dim() == 1;
        var atBaseline = shared
            ? Scores(input.Score, input.Baseline.detach().unsqueeze(0), 1)
            : Scores(input.Score, input.BaselineRows().detach(), input.ChunkRows);
        var gaps = new float[input.Rows];
        for (int r = 0; r < gaps.Length; r++)
            gaps[r] = atInput[r] - atBaseline[shared ? 0 : r];
        return (gaps, input.Rows + (shared ? 1L : input.Rows));
    }

    /// <summary>Copies a 2-D float tensor out as a row-major array.</summary>
    public static float[] ToArray(Tensor t) => t.to(ScalarType.Float32).contiguous().data<float>().ToArray();

    /// <summary>Validates the shared chunk setting.</summary>
    public static void CheckChunk(int chunkRows)
    {
        if (chunkRows < 1)
            throw new DriftWatchException($"chunk rows must be at least 1; got {chunkRows}");
    }
}
