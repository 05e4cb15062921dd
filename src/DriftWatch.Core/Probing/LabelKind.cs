namespace DriftWatch.Probing;

/// <summary>What kind of target a run's labels are; the label rules read it to decide how a row's label points.</summary>
public enum LabelKind
{
    /// <summary>No labels were given.</summary>
    None = 0,

    /// <summary>Two classes, written 0/1 or −1/+1.</summary>
    Binary = 1,

    /// <summary>Three or more classes, written as the integers 0 … K−1.</summary>
    Classes = 2,

    /// <summary>A real-valued target (regression), or labels no other kind fits.</summary>
    Continuous = 3,
}

/// <summary>Tells a run's label kind from its labels.</summary>
public static class LabelKinds
{
    /// <summary>Most classes a label may have and still be read as class indices (more distinct integers read as a continuous target).</summary>
    public const int MaximumClasses = 1000;

    /// <summary>
    /// The kind of <paramref name="labels"/>: none without labels; binary when every label is 0 or 1, or every label is −1 or +1;
    /// classes when every label is an integer in 0 … K−1 with K ≥ 3 (at most <see cref="MaximumClasses"/>) and at least three values occur;
    /// continuous otherwise. A non-finite label makes the kind continuous (the label rules then see it and say so).
    /// </summary>
    public static LabelKind Of(IReadOnlyList<float>? labels)
    {
        if (labels is null || labels.Count == 0)
            return LabelKind.None;
        bool zeroOne = true, plusMinus = true, indices = true;
        float max = 0;
        var seen = new HashSet<float>();
        foreach (float l in labels)
        {
            zeroOne &= l is 0f or 1f;
            plusMinus &= l is -1f or 1f;
            bool index = float.IsFinite(l) && l >= 0 && l < MaximumClasses && l == MathF.Floor(l);
            indices &= index;
            if (index)
            {
                max = Math.Max(max, l);
                seen.Add(l);
            }
        }
        if (zeroOne || plusMinus)
            return LabelKind.Binary;
        return indices && seen.Count >= 3 ? LabelKind.Classes : LabelKind.Continuous;
    }

    /// <summary>Whether a binary label marks the positive class (1 in 0/1, +1 in ±1).</summary>
    public static bool IsPositive(float label) => label > 0;

    /// <summary>The class a label names: a binary label's class is 1 for the positive label (1 or +1) and 0 otherwise; a class label is its index.</summary>
    public static int ClassOf(float label) => label > 0 && label < 1.5f ? 1 : label >= 1.5f ? (int)label : 0;

    /// <summary>
    /// The direction each row's label points a score, for label alignment (mean of score × sign over mean |score|), when
    /// the attributed output is the binary logit or probability (see <see cref="AlignmentSigns(IReadOnlyList{float}?, Model.AttributionTarget?)"/>).
    /// </summary>
    public static double[]? AlignmentSigns(IReadOnlyList<float>? labels) => AlignmentSigns(labels, null);

    /// <summary>
    /// The direction each row's label points a score of <paramref name="target"/> (null: the logit), for label alignment
    /// (mean of score × sign over mean |score|, in [−1, 1]); null when no direction can be read, see <see cref="WhyNoAlignment"/>.
    /// </summary>
    /// <remarks>
    /// <list type="bullet">
    /// <item>The row's true class (<see cref="Model.TargetKind.TrueClass"/>), binary or class labels: +1 on every row — the
    /// score is already towards the row's own class, so alignment is mean(score) / mean |score|.</item>
    /// <item>One class's output (<see cref="Model.TargetKind.ClassIndex"/> k), binary or class labels: one-vs-rest, +1 where
    /// the row's class is k, −1 elsewhere.</item>
    /// <item>Binary labels, any other target: +1 for the positive class, −1 for the negative class.</item>
    /// <item>A continuous target (regression): the sign of the label minus the median label of all probe rows (both halves,
    /// so both share one centre); a row at the median gets 0 and counts in the denominator only. The median, not the mean,
    /// so a few extreme targets do not move the centre.</item>
    /// </list>
    /// K-class labels with a logit, probability or regression target have no direction (the output is not about a class).
    /// </remarks>
    public static double[]? AlignmentSigns(IReadOnlyList<float>? labels, Model.AttributionTarget? target)
    {
        if (WhyNoAlignment(labels, target) is not null)
            return null;
        var kind = Of(labels);
        var targetKind = target?.Kind ?? Model.TargetKind.Logit;
        if (kind == LabelKind.Continuous)
        {
            double median = Median(labels!);
            return [.. labels!.Select(l => (double)Math.Sign(l - median))];
        }
        return targetKind switch
        {
            Model.TargetKind.TrueClass => [.. labels!.Select(_ => 1.0)],
            Model.TargetKind.ClassIndex => [.. labels!.Select(l => ClassOf(l) == target!.OutputIndex ? 1.0 : -1.0)],
            _ => [.. labels!.Select(l => IsPositive(l) ? 1.0 : -1.0)],
        };
    }

    /// <summary>
    /// Why label alignment cannot be read for these labels and this target (null: it can), as the end of a sentence starting
    /// "label alignment needs …".
    /// </summary>
    public static string? WhyNoAlignment(IReadOnlyList<float>? labels, Model.AttributionTarget? target)
    {
        var kind = Of(labels);
        var targetKind = target?.Kind ?? Model.TargetKind.Logit;
        return kind switch
        {
            LabelKind.None => "probe labels, and the probe set has none (pass labels in ProbeRows)",
            LabelKind.Classes when targetKind is not (Model.TargetKind.TrueClass or Model.TargetKind.ClassIndex) =>
                $"the row's true class (target 'true class') or one class's output (target 'class N') for {labels!.Select(ClassOf).Distinct().Count()}-class labels; the run attributes the {target?.Label ?? "logit"}",
            LabelKind.Continuous when labels!.Any(l => !float.IsFinite(l)) => "finite labels, and some probe labels are NaN or infinite",
            _ => null,
        };
    }

    private static double Median(IReadOnlyList<float> labels)
    {
        var sorted = labels.Select(l => (double)l).Order().ToArray();
        int n = sorted.Length;
        return n % 2 == 1 ? sorted[n / 2] : (sorted[n / 2 - 1] + sorted[n / 2]) / 2;
    }
}
