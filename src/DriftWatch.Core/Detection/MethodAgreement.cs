using System.Collections.Immutable;
using System.Globalization;
using DriftWatch.Attribution;

namespace DriftWatch.Detection;

/// <summary>How far two methods' maps agree: Spearman's rank correlation of their held-out importance.</summary>
public static class MethodAgreement
{
    /// <summary>Spearman ρ between two held-out importance vectors (mean |score| per feature); NaN when either is constant.</summary>
    public static double Spearman(IReadOnlyList<double> first, IReadOnlyList<double> second)
    {
        ArgumentNullException.ThrowIfNull(first);
        ArgumentNullException.ThrowIfNull(second);
        if (first.Count != second.Count)
            throw new ArgumentException($"importance vectors differ in length: {first.Count} and {second.Count}", nameof(second));
        return first.Count < 2 ? double.NaN : Statistics.Spearman(first, second);
    }

    /// <summary>Spearman ρ of the held-out importance of two maps of the same probe set, whose first <paramref name="heldOutRows"/> rows are the held-out half.</summary>
    public static double Spearman(AttributionMap first, AttributionMap second, int heldOutRows)
    {
        ArgumentNullException.ThrowIfNull(first);
        ArgumentNullException.ThrowIfNull(second);
        var rows = Enumerable.Range(0, heldOutRows).ToArray();
        return Spearman(HalfImportance.Compute(first, rows, null).MeanAbsolute, HalfImportance.Compute(second, rows, null).MeanAbsolute);
    }

    /// <summary>ρ as shown to people: two decimals, or <c>n/a</c> when undefined.</summary>
    public static string Format(double rho) => double.IsFinite(rho) ? rho.ToString("0.00", CultureInfo.InvariantCulture) : "n/a";
}

/// <summary>
/// The detector run on every configured method's maps: the primary (first) method's findings make the verdict exactly as
/// <see cref="DivergenceDetector"/> alone would; each other method has a detector of its own, and every feature finding of the
/// primary method is annotated with which methods see it too and how well their held-out importance ranks agree.
/// </summary>
/// <remarks>With one method configured, verdicts are the primary detector's, unchanged. Not thread-safe.</remarks>
public sealed class CrossMethodDetector
{
    private readonly ImmutableArray<string> _methods;
    private readonly DivergenceDetector[] _detectors;
    private readonly int _heldOutRows;

    /// <summary>Creates the detectors.</summary>
    /// <param name="context">The run's context.</param>
    /// <param name="policy">The gate's policy.</param>
    /// <param name="methods">The configured methods' names, the primary first.</param>
    public CrossMethodDetector(RunContext context, GatePolicy policy, IReadOnlyList<string> methods)
    {
        ArgumentNullException.ThrowIfNull(context);
        ArgumentNullException.ThrowIfNull(policy);
        ArgumentNullException.ThrowIfNull(methods);
        if (methods.Count == 0)
            throw new ArgumentException("at least one method is needed", nameof(methods));
        _methods = [.. methods];
        _detectors = methods.Select(_ => new DivergenceDetector(context, policy)).ToArray();
        _heldOutRows = context.HeldOutCount;
    }

    /// <summary>The primary method's name.</summary>
    public string PrimaryMethod => _methods[0];

    /// <summary>Reads the next epoch: <paramref name="evidence"/> carries the primary map; <paramref name="maps"/> holds every method's map (missing when not attributed).</summary>
    public Assessment Observe(EpochEvidence evidence, IReadOnlyDictionary<string, AttributionMap> maps)
    {
        ArgumentNullException.ThrowIfNull(evidence);
        ArgumentNullException.ThrowIfNull(maps);
        var primary = _detectors[0].Observe(evidence);
        if (_methods.Length == 1)
            return primary;

        var others = new List<(string Method, AttributionMap? Map, ImmutableArray<Finding> Findings)>();
        for (int i = 1; i < _methods.Length; i++)
        {
            var map = maps.GetValueOrDefault(_methods[i]);
            var assessment = _detectors[i].Observe(new EpochEvidence(evidence.Epoch, evidence.Metrics, map, []));
            others.Add((_methods[i], map, assessment.Verdict.Findings));
        }
        if (evidence.Map is null)
            return primary;

        var agreement = others
            .Where(o => o.Map is not null)
            .Select(o => (o.Method, Rho: MethodAgreement.Spearman(evidence.Map, o.Map!, _heldOutRows)))
            .ToList();
        var findings = primary.Verdict.Findings.Select(f => Annotate(f, others, agreement)).ToImmutableArray();
        var verdict = primary.Verdict with { Findings = findings, Reasons = findings.Select(f => f.Evidence).ToImmutableArray() };
        return primary with { Verdict = verdict };
    }

    private Finding Annotate(Finding finding, List<(string Method, AttributionMap? Map, ImmutableArray<Finding> Findings)> others, List<(string Method, double Rho)> agreement)
    {
        var family = Family(finding.Kind);
        if (family is null || finding.Feature.Length == 0)
            return finding;
        var seen = others.Where(o => o.Findings.Any(f => f.Feature == finding.Feature && Family(f.Kind) == family)).Select(o => o.Method).ToList();
        var unseen = others.Where(o => o.Map is not null && !seen.Contains(o.Method)).Select(o => o.Method).ToList();
        var missing = others.Where(o => o.Map is null).Select(o => o.Method).ToList();
        string note;
        if (seen.Count > 0)
            note = $" Seen by {seen.Count + 1} of {_methods.Length} methods ({PrimaryMethod}, {string.Join(", ", seen)}{(unseen.Count > 0 ? "; not by " + string.Join(", ", unseen) : "")}).";
        else if (unseen.Count > 0)
            note = $" Seen by {PrimaryMethod} only ({string.Join(", ", unseen)} {(unseen.Count == 1 ? "does" : "do")} not show it at this epoch): it may be an artefact of that method.";
        else
            note = "";
        if (missing.Count > 0)
            note += $" No map from {string.Join(", ", missing)} at this epoch.";
        if (agreement.Count > 0)
            note += " Held-out importance ranks agree with " + string.Join(", ", agreement.Select(a => $"{a.Method} at ρ = {MethodAgreement.Format(a.Rho)}")) + ".";
        string evidence = finding.Evidence.TrimEnd();
        if (!evidence.EndsWith('.'))
            evidence += ".";
        return finding with { Evidence = evidence + note };
    }

    // Findings about the same feature that different methods may name differently: a gap between the halves, or one feature deciding.
    private static string? Family(FindingKind kind) => kind switch
    {
        FindingKind.Leak or FindingKind.MemorisedIdentifier => "gap",
        FindingKind.DominantFeature or FindingKind.ProbableLeak => "dominance",
        _ => null,
    };
}
