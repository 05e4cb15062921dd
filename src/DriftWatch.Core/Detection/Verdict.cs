using System.Collections.Immutable;

namespace DriftWatch.Detection;

/// <summary>The gate's answer at an epoch.</summary>
public enum VerdictKind
{
    /// <summary>Nothing calls for attention.</summary>
    Continue = 0,

    /// <summary>Something deserves a look; training may go on.</summary>
    Caution = 1,

    /// <summary>Stopping is advised. Advice to a person, not proof.</summary>
    Halt = 2,
}

/// <summary>What a finding is about.</summary>
public enum FindingKind
{
    /// <summary>A feature the model leans on for training rows but not for held-out rows.</summary>
    Leak,

    /// <summary>An identifier-like categorical whose attributions agree with training labels but not held-out ones.</summary>
    MemorisedIdentifier,

    /// <summary>One feature decides on both halves; may be genuine.</summary>
    DominantFeature,

    /// <summary>A dominant categorical with a value that nearly fixes the label on held-out rows.</summary>
    ProbableLeak,

    /// <summary>Validation loss has risen beyond the policy's generalisation-loss threshold.</summary>
    Overfitting,

    /// <summary>NaN or Inf in losses or attributions, or convergence deltas beyond tolerance.</summary>
    NumericalTrouble,

    /// <summary>Monitoring itself failed at this epoch; the training went on.</summary>
    MonitoringFailure,
}

/// <summary>Finding kinds by their stored names (the names policies and stores use).</summary>
public static class FindingKinds
{
    /// <summary>The names of every kind this version knows, in verdict order.</summary>
    public static IReadOnlyList<string> Names { get; } = Enum.GetNames<FindingKind>();

    /// <summary>The kind with this exact (case-sensitive) stored name; false when this version knows none.</summary>
    public static bool TryParse(string? name, out FindingKind kind)
    {
        foreach (var known in Enum.GetValues<FindingKind>())
        {
            if (string.Equals(known.ToString(), name, StringComparison.Ordinal))
            {
                kind = known;
                return true;
            }
        }
        kind = default;
        return false;
    }

    /// <summary>The stored name of a kind.</summary>
    public static string NameOf(FindingKind kind) => kind.ToString();
}

/// <summary>A flagged feature (or the run as a whole) at an epoch, with its size and the evidence behind it.</summary>
/// <param name="Kind">What the finding is about.</param>
/// <param name="Severity">The verdict this finding alone asks for.</param>
/// <param name="Feature">The feature concerned, or empty for run-level findings.</param>
/// <param name="Size">The statistic's value.</param>
/// <param name="NoiseFloor">The noise floor it was judged against (0 when none applies).</param>
/// <param name="Epochs">The epochs the finding covers.</param>
/// <param name="Evidence">Plain-language evidence, one sentence.</param>
public sealed record Finding(
    FindingKind Kind,
    VerdictKind Severity,
    string Feature,
    double Size,
    double NoiseFloor,
    ImmutableArray<int> Epochs,
    string Evidence)
{
    /// <summary>
    /// The methods whose maps alone show this finding, when the run has several methods and the one the verdict reads
    /// (the first configured) does not; empty for that method's own findings.
    /// </summary>
    public ImmutableArray<string> SeenOnlyBy { get; init; } = [];

    /// <summary>
    /// Confidence from method agreement: Spearman ρ of held-out importance between the method that raised the finding and
    /// the others at this epoch — for a finding seen without the verdict's method, the first method that sees it against
    /// the verdict's method; for the verdict's method's own findings, the lowest ρ with any other method. NaN when no
    /// other method's map was there or with one method configured.
    /// </summary>
    public double Agreement { get; init; } = double.NaN;

    /// <summary>Whether only other methods than the one the verdict reads show this finding.</summary>
    public bool IsSeenByOtherMethodsOnly => !SeenOnlyBy.IsDefaultOrEmpty;
}

/// <summary>The gate's verdict at an epoch, with the reasons and findings behind it.</summary>
/// <param name="Epoch">The epoch judged.</param>
/// <param name="Kind">Continue, Caution or Halt.</param>
/// <param name="Reasons">One line per reason; empty for a plain Continue.</param>
/// <param name="Findings">The findings the gate read.</param>
public sealed record Verdict(int Epoch, VerdictKind Kind, ImmutableArray<string> Reasons, ImmutableArray<Finding> Findings)
{
    /// <summary>Whether the gate advises stopping.</summary>
    public bool IsHalt => Kind == VerdictKind.Halt;

    /// <summary>A plain Continue with no findings.</summary>
    public static Verdict Continue(int epoch) => new(epoch, VerdictKind.Continue, [], []);
}
