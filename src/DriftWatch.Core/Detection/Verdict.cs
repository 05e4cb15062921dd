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

/// <summary>
/// What a finding is about, by its stored name. The kinds this version knows are the rules of
/// <see cref="Rules.FindingRules"/>, each with its words, advice, family and severity; a name read from a store written by a
/// newer version is kept as it is, and <see cref="IsKnown"/> is false for it.
/// </summary>
/// <remarks>Kinds order as the rule catalogue lists them (the verdict's order); unknown kinds come after, by name.</remarks>
public readonly record struct FindingKind : IComparable<FindingKind>
{
    /// <summary>A kind by its stored name.</summary>
    /// <exception cref="ArgumentException">The name is empty or not a plain identifier (letters and digits).</exception>
    public FindingKind(string name)
    {
        ArgumentException.ThrowIfNullOrEmpty(name);
        if (!IsName(name))
            throw new ArgumentException($"a finding kind's name is letters and digits; got '{name}'", nameof(name));
        Name = name;
    }

    /// <summary>Whether <paramref name="name"/> can name a kind (any version's): ASCII letters and digits, not empty.</summary>
    public static bool IsName(string? name) => !string.IsNullOrEmpty(name) && name.All(char.IsAsciiLetterOrDigit);

    /// <summary>The stored name, e.g. <c>MemorisedIdentifier</c>.</summary>
    public string Name => field ?? "";

    /// <summary>Whether this version has a rule for the kind.</summary>
    public bool IsKnown => Rules.FindingRules.Find(this) is not null;

    /// <summary>The kind's description: its rule's, or one that says this version does not know it.</summary>
    public Rules.FindingKindInfo Info => Rules.FindingRules.Find(this) ?? Rules.FindingKindInfo.Unknown(this);

    /// <summary>A feature the model leans on for training rows but not for held-out rows.</summary>
    public static FindingKind Leak { get; } = new("Leak");

    /// <summary>A feature the model relies on more for training rows, whose column relates to the label the same way on both sides: overfitting on it, not a leak.</summary>
    public static FindingKind OverfittedFeature { get; } = new("OverfittedFeature");

    /// <summary>A data note: a column that relates to the label differently in training and held-out rows, before the model relies on it.</summary>
    public static FindingKind SplitInconsistency { get; } = new("SplitInconsistency");

    /// <summary>An identifier-like categorical whose attributions agree with training labels but not held-out ones.</summary>
    public static FindingKind MemorisedIdentifier { get; } = new("MemorisedIdentifier");

    /// <summary>One feature decides on both halves; may be genuine.</summary>
    public static FindingKind DominantFeature { get; } = new("DominantFeature");

    /// <summary>A dominant categorical with a value that nearly fixes the label on held-out rows.</summary>
    public static FindingKind ProbableLeak { get; } = new("ProbableLeak");

    /// <summary>Validation loss has risen beyond the policy's generalisation-loss threshold.</summary>
    public static FindingKind Overfitting { get; } = new("Overfitting");

    /// <summary>NaN or Inf in losses or attributions, or convergence deltas beyond tolerance.</summary>
    public static FindingKind NumericalTrouble { get; } = new("NumericalTrouble");

    /// <summary>Monitoring itself failed at this epoch; the training went on.</summary>
    public static FindingKind MonitoringFailure { get; } = new("MonitoringFailure");

    /// <inheritdoc/>
    public int CompareTo(FindingKind other)
    {
        int mine = Rules.FindingRules.IndexOf(this), theirs = Rules.FindingRules.IndexOf(other);
        if (mine >= 0 || theirs >= 0)
            return (mine < 0 ? int.MaxValue : mine).CompareTo(theirs < 0 ? int.MaxValue : theirs);
        return string.CompareOrdinal(Name, other.Name);
    }

    /// <summary>The stored name.</summary>
    public override string ToString() => Name;

    /// <summary>Orders by the catalogue (see <see cref="CompareTo"/>).</summary>
    public static bool operator <(FindingKind left, FindingKind right) => left.CompareTo(right) < 0;

    /// <summary>Orders by the catalogue (see <see cref="CompareTo"/>).</summary>
    public static bool operator >(FindingKind left, FindingKind right) => left.CompareTo(right) > 0;

    /// <summary>Orders by the catalogue (see <see cref="CompareTo"/>).</summary>
    public static bool operator <=(FindingKind left, FindingKind right) => left.CompareTo(right) <= 0;

    /// <summary>Orders by the catalogue (see <see cref="CompareTo"/>).</summary>
    public static bool operator >=(FindingKind left, FindingKind right) => left.CompareTo(right) >= 0;
}

/// <summary>Finding kinds by their stored names (the names policies and stores use).</summary>
public static class FindingKinds
{
    /// <summary>The names of every kind this version knows, in verdict order.</summary>
    public static IReadOnlyList<string> Names => [.. Rules.FindingRules.Kinds.Select(k => k.Kind.Name)];

    /// <summary>The kind with this exact (case-sensitive) stored name; false when this version knows none.</summary>
    public static bool TryParse(string? name, out FindingKind kind)
    {
        foreach (var known in Rules.FindingRules.Kinds)
        {
            if (string.Equals(known.Kind.Name, name, StringComparison.Ordinal))
            {
                kind = known.Kind;
                return true;
            }
        }
        kind = default;
        return false;
    }

    /// <summary>A kind read from a store: a known kind, or the stored name kept as a kind this version does not know.</summary>
    /// <exception cref="ArgumentException">The name is empty or not letters and digits.</exception>
    public static FindingKind FromStored(string name) => TryParse(name, out var kind) ? kind : new FindingKind(name);

    /// <summary>The stored name of a kind.</summary>
    public static string NameOf(FindingKind kind) => kind.Name;
}

/// <summary>The epochs a finding covers, from its first to its last (both included, 1-based as users number them).</summary>
/// <param name="First">The first epoch.</param>
/// <param name="Last">The last epoch, at least <paramref name="First"/>.</param>
public readonly record struct EpochSpan(int First, int Last)
{
    /// <summary>The first epoch.</summary>
    public int First { get; } = First <= Last ? First : throw new ArgumentOutOfRangeException(nameof(First), First, $"an epoch span runs forwards; got {First} to {Last}");

    /// <summary>The span of one epoch.</summary>
    public static EpochSpan At(int epoch) => new(epoch, epoch);

    /// <summary>The span read from a stored list of epochs: its first and last entries (one entry: that epoch).</summary>
    /// <exception cref="ArgumentException">The list is empty.</exception>
    public static EpochSpan FromStored(IReadOnlyList<int> epochs)
    {
        ArgumentNullException.ThrowIfNull(epochs);
        if (epochs.Count == 0)
            throw new ArgumentException("a stored finding names at least one epoch", nameof(epochs));
        return new EpochSpan(epochs[0], epochs[^1]);
    }

    /// <summary>Whether the span covers <paramref name="epoch"/>.</summary>
    public bool Contains(int epoch) => epoch >= First && epoch <= Last;

    /// <summary>The span as shown to people: <c>7</c> or <c>3–7</c>.</summary>
    public override string ToString() => First == Last
        ? First.ToString(System.Globalization.CultureInfo.InvariantCulture)
        : string.Create(System.Globalization.CultureInfo.InvariantCulture, $"{First}–{Last}");
}

/// <summary>A flagged feature (or the run as a whole) at an epoch, with its size and the evidence behind it.</summary>
/// <param name="Kind">What the finding is about.</param>
/// <param name="Severity">The verdict this finding alone asks for.</param>
/// <param name="Feature">The feature concerned, or empty for run-level findings.</param>
/// <param name="Size">The statistic's value.</param>
/// <param name="NoiseFloor">The noise floor it was judged against (0 when none applies).</param>
/// <param name="Epochs">The epochs the finding covers, first to last.</param>
/// <param name="Evidence">Plain-language evidence, one sentence.</param>
public sealed record Finding(
    FindingKind Kind,
    VerdictKind Severity,
    string Feature,
    double Size,
    double NoiseFloor,
    EpochSpan Epochs,
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
