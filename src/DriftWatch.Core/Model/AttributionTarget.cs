using static TorchSharp.torch;

namespace DriftWatch.Model;

/// <summary>What kind of output is attributed.</summary>
public enum TargetKind
{
    /// <summary>The raw logit of a binary classifier (the default: attribution on the logit converges with fewer steps).</summary>
    Logit,

    /// <summary>The sigmoid of a binary classifier's logit.</summary>
    Probability,

    /// <summary>One class's score of a multi-class output.</summary>
    ClassIndex,

    /// <summary>A regression output.</summary>
    Regression,
}

/// <summary>Which scalar per row of the model's output is attributed.</summary>
/// <param name="Kind">The kind of output.</param>
/// <param name="OutputIndex">The output column (the class for <see cref="TargetKind.ClassIndex"/>; 0 otherwise).</param>
public sealed record AttributionTarget(TargetKind Kind, int OutputIndex)
{
    /// <summary>The logit of a binary classifier, output column 0.</summary>
    public static AttributionTarget Logit { get; } = new(TargetKind.Logit, 0);

    /// <summary>The probability (sigmoid of the logit) of a binary classifier.</summary>
    public static AttributionTarget Probability { get; } = new(TargetKind.Probability, 0);

    /// <summary>A regression output, column 0.</summary>
    public static AttributionTarget Regression { get; } = new(TargetKind.Regression, 0);

    /// <summary>One class of a multi-class output.</summary>
    public static AttributionTarget Class(int index)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(index);
        return new AttributionTarget(TargetKind.ClassIndex, index);
    }

    /// <summary>A short label for storage and charts, e.g. <c>logit</c> or <c>class 3</c>.</summary>
    public string Label => Kind switch
    {
        TargetKind.Logit => "logit",
        TargetKind.Probability => "probability",
        TargetKind.Regression => "regression",
        _ => $"class {OutputIndex}",
    };

    /// <summary>Picks the attributed scalar per row out of a model output.</summary>
    public Tensor Select(Tensor output)
    {
        ArgumentNullException.ThrowIfNull(output);
        Tensor column = output.dim() == 1 ? output : output.select(1, OutputIndex);
        return Kind == TargetKind.Probability ? column.sigmoid() : column;
    }

    /// <summary>Parses <see cref="Label"/> back.</summary>
    public static AttributionTarget Parse(string label)
    {
        ArgumentNullException.ThrowIfNull(label);
        return label switch
        {
            "logit" => Logit,
            "probability" => Probability,
            "regression" => Regression,
            _ when label.StartsWith("class ", StringComparison.Ordinal)
                && int.TryParse(label.AsSpan(6), System.Globalization.NumberStyles.Integer, System.Globalization.CultureInfo.InvariantCulture, out int k) && k >= 0 => Class(k),
            _ => throw new DriftWatchException($"target must be logit, probability, regression or 'class N'; got '{label}'"),
        };
    }
}
