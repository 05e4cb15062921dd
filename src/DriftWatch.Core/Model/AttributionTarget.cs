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

    /// <summary>
    /// Each row's score for its own true class, read from the probe's labels (class indices 0 … K−1, or a binary label as
    /// class 0 or 1), of a model with one output per class. Rows are attributed class by class, each with that class's
    /// output; the map is the same as attributing every row towards its own label.
    /// </summary>
    TrueClass,
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

    /// <summary>Each row's own true class of a multi-class output (see <see cref="TargetKind.TrueClass"/>).</summary>
    public static AttributionTarget TrueClass { get; } = new(TargetKind.TrueClass, 0);

    /// <summary>Whether the attributed output differs between rows (the row's own class), so it is chosen per row from the labels.</summary>
    public bool IsPerRow => Kind == TargetKind.TrueClass;

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
        TargetKind.TrueClass => "true class",
        _ => $"class {OutputIndex}",
    };

    /// <summary>Picks the attributed scalar per row out of a model output.</summary>
    /// <exception cref="DriftWatchException">The target is <see cref="TrueClass"/>, whose column differs per row (see <see cref="SelectOwn"/>).</exception>
    public Tensor Select(Tensor output)
    {
        ArgumentNullException.ThrowIfNull(output);
        if (IsPerRow)
            throw new DriftWatchException("the true-class target picks each row's own class; attribute it through the monitor or EpochAttribution, which split the rows by class");
        Tensor column = output.dim() == 1 ? output : output.select(1, OutputIndex);
        return Kind == TargetKind.Probability ? column.sigmoid() : column;
    }

    /// <summary>Each row's score for its own class: <c>output[r, classes[r]]</c>, for a <c>[rows, K]</c> output and <c>[rows]</c> class indices.</summary>
    /// <exception cref="DriftWatchException">The output has fewer columns than a class index needs.</exception>
    public static Tensor SelectOwn(Tensor output, Tensor classes)
    {
        ArgumentNullException.ThrowIfNull(output);
        ArgumentNullException.ThrowIfNull(classes);
        long width = output.dim() == 1 ? 1 : output.shape[1];
        long top = classes.numel() == 0 ? 0 : classes.max().item<long>();
        if (output.dim() != 2 || top >= width)
            throw new DriftWatchException($"the true-class target needs one output per class: the labels run to class {top} but the model scores {width} output(s); give the model K outputs or choose another target");
        return output.gather(1, classes.to(ScalarType.Int64).unsqueeze(1)).squeeze(1);
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
            "true class" => TrueClass,
            _ when label.StartsWith("class ", StringComparison.Ordinal)
                && int.TryParse(label.AsSpan(6), System.Globalization.NumberStyles.Integer, System.Globalization.CultureInfo.InvariantCulture, out int k) && k >= 0 => Class(k),
            _ => throw new DriftWatchException($"target must be logit, probability, regression, 'true class' or 'class N'; got '{label}'"),
        };
    }
}
