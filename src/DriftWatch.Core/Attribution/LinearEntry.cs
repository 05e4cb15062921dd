using DriftWatch.Model;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>
/// The attributed function split at an affine first layer: <c>Score(f) = Rest(f Wᵀ + b)</c>. Path methods that find one on
/// their input (<see cref="AttributionInput.Entry"/>) move along the path in the entry layer's output (see
/// <see cref="ILinearEntry"/>).
/// </summary>
/// <param name="Weight">The entry layer's weight, <c>[units, columns]</c>.</param>
/// <param name="Bias">Its bias, <c>[units]</c>, or null.</param>
/// <param name="Rest">The entry layer's output <c>[n, units]</c> to the attributed scalar per row <c>[n]</c>.</param>
public sealed record LinearEntry(Tensor Weight, Tensor? Bias, Func<Tensor, Tensor> Rest)
{
    /// <summary>Probe rows on which <see cref="Check"/> compares the split function with the whole one.</summary>
    public const int CheckedRows = 8;

    /// <summary>The entry layer's output for feature-space rows: <c>f Wᵀ + b</c>.</summary>
    public Tensor Apply(Tensor features) => nn.functional.linear(features, Weight, Bias);

    /// <summary>
    /// The split for <paramref name="model"/> and <paramref name="target"/>, or null when the model does not declare an
    /// entry layer (<see cref="ILinearEntry"/>).
    /// </summary>
    public static LinearEntry? Of(IWatchedModel model, AttributionTarget target)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(target);
        if (model is not ILinearEntry entry)
            return null;
        return new LinearEntry(entry.EntryWeight.detach(), entry.EntryBias?.detach(), e => target.Select(entry.ScoreAfterEntry(e)));
    }

    /// <summary>
    /// Checks that the split reproduces <paramref name="score"/> on the first <see cref="CheckedRows"/> rows of
    /// <paramref name="features"/>, and that the weight fits the feature space.
    /// </summary>
    /// <exception cref="DriftWatchException">The weight does not fit, or the split function gives other values.</exception>
    public void Check(Func<Tensor, Tensor> score, Tensor features)
    {
        ArgumentNullException.ThrowIfNull(score);
        ArgumentNullException.ThrowIfNull(features);
        const string fix = "fix the model's ILinearEntry members or drop the interface";
        if (Weight.dim() != 2 || Weight.shape[1] != features.shape[1])
            throw new DriftWatchException($"the model's entry weight has shape [{string.Join(", ", Weight.shape)}]; expected [units, {features.shape[1]}] for a feature space of {features.shape[1]} columns; {fix}");
        if (Bias is not null && (Bias.dim() != 1 || Bias.shape[0] != Weight.shape[0]))
            throw new DriftWatchException($"the model's entry bias has shape [{string.Join(", ", Bias.shape)}]; expected [{Weight.shape[0]}] to match the entry weight; {fix}");
        using var scope = torch.NewDisposeScope();
        using var noGrad = torch.no_grad();
        var rows = features[TensorIndex.Slice(0, Math.Min(features.shape[0], CheckedRows))];
        var whole = Gradients.ToArray(score(rows));
        var split = Gradients.ToArray(Rest(Apply(rows)));
        if (whole.Length != split.Length)
            throw new DriftWatchException($"the model's score step after its entry layer returned {split.Length} values for {rows.shape[0]} rows where the whole score step returned {whole.Length}; {fix}");
        for (int i = 0; i < whole.Length; i++)
        {
            // The same operations in the same order give the same floats; the margin allows another summation order.
            if (!(Math.Abs(whole[i] - split[i]) <= 1e-5 + 1e-4 * Math.Abs(whole[i])))
                throw new DriftWatchException($"the model's entry layer does not reproduce its score step: row {i} scores {whole[i]:G6} through the whole model and {split[i]:G6} through ScoreAfterEntry(f Wᵀ + b); {fix}");
        }
    }
}
