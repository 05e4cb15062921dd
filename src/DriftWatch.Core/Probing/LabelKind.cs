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

    /// <summary>
    /// The direction each row's label points a score, for label alignment (mean of score × sign over mean |score|): +1 for a
    /// binary row's positive class, −1 for its negative class; null when the labels are not binary.
    /// </summary>
    public static double[]? AlignmentSigns(IReadOnlyList<float>? labels) =>
        Of(labels) == LabelKind.Binary ? [.. labels!.Select(l => IsPositive(l) ? 1.0 : -1.0)] : null;
}
