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
/// The detector run on every configured method's maps: the primary (first) method's findings are exactly those
/// <see cref="DivergenceDetector"/> alone would make; each other method has a detector of its own. Every feature finding
/// of the primary method is annotated with which methods see it too and how well their held-out importance ranks agree,
/// and a feature finding that only other methods make is reported as well, marked <see cref="Finding.SeenOnlyBy"/>
/// those methods, asking for Caution at most unless <see cref="GatePolicy.SingleMethodMayHalt"/> is set.
/// </summary>
/// <remarks>With one method configured, verdicts are the primary detector's, unchanged. Not thread-safe.</remarks>
public sealed class CrossMethodDetector
{
    private readonly ImmutableArray<string> _methods;
    private readonly DivergenceDetector[] _detectors;
    private readonly GatePolicy _policy;
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
        _policy = policy;
        _heldOutRows = context.HeldOutCount;
    }

    /// <summary>The primary method's name.</summary>
    public string PrimaryMethod => _methods[0];

    /// <summary>Reads the next epoch: <paramref name="input"/> carries the primary map; <paramref name="maps"/> holds every method's map (missing when not attributed).</summary>
    public Assessment Observe(EpochInput input, IReadOnlyDictionary<string, AttributionMap> maps)
    {
        ArgumentNullException.ThrowIfNull(input);
        ArgumentNullException.ThrowIfNull(maps);
        var primary = _detectors[0].Observe(input);
        if (_methods.Length == 1)
            return primary;

        var others = new List<Other>();
        for (int i = 1; i < _methods.Length; i++)
        {
            var map = maps.GetValueOrDefault(_methods[i]);
            var assessment = _detectors[i].Observe(new EpochInput(input.Epoch, input.Metrics, map, []));
            double rho = map is null || input.Map is null ? double.NaN : MethodAgreement.Spearman(input.Map, map, _heldOutRows);
            others.Add(new Other(_methods[i], map, assessment.Verdict.Findings, rho));
        }
        if (input.Map is null && others.All(o => o.Map is null))
            return primary;

        var findings = primary.Verdict.Findings.Select(f => Annotate(f, others, input.Map is not null)).ToList();
        findings.AddRange(SeenByOthersOnly(primary.Verdict.Findings, others, input.Map is not null));
        // Severity first, as the primary detector orders them; the sort is stable, so the primary's own order stays.
        var ordered = findings.OrderByDescending(f => f.Severity).ToImmutableArray();
        var kind = ordered.IsEmpty ? VerdictKind.Continue : ordered.Max(f => f.Severity);
        var verdict = primary.Verdict with { Kind = kind, Findings = ordered, Reasons = ordered.Select(f => f.Evidence).ToImmutableArray() };
        return primary with { Verdict = verdict };
    }

    private sealed record Other(string Method, AttributionMap? Map, ImmutableArray<Finding> Findings, double Rho);

    private Finding Annotate(Finding finding, List<Other> others, bool primaryMapped)
    {
        var family = Family(finding.Kind);
        if (family is null || finding.Feature.Length == 0 || !primaryMapped)
            return finding;
        var seen = others.Where(o => o.Findings.Any(f => f.Feature == finding.Feature && Family(f.Kind) == family)).Select(o => o.Method).ToList();
        var unseen = others.Where(o => o.Map is not null && !seen.Contains(o.Method)).Select(o => o.Method).ToList();
        var missing = others.Where(o => o.Map is null).Select(o => o.Method).ToList();
        var agreement = others.Where(o => o.Map is not null).ToList();
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
        double lowest = agreement.Select(a => a.Rho).Where(double.IsFinite).DefaultIfEmpty(double.NaN).Min();
        return finding with { Evidence = Sentence(finding.Evidence) + note, Agreement = lowest };
    }

    // Feature findings that other methods make and the primary does not: one per (family, feature), in the configured
    // order of the methods that see it, the first such method's finding carrying the evidence.
    private IEnumerable<Finding> SeenByOthersOnly(ImmutableArray<Finding> primaryFindings, List<Other> others, bool primaryMapped)
    {
        var reported = primaryFindings
            .Where(f => Family(f.Kind) is not null && f.Feature.Length > 0)
            .Select(f => (Family(f.Kind)!, f.Feature))
            .ToHashSet();
        var groups = new List<(string Family, string Feature, List<(Other Other, Finding Finding)> Seen)>();
        foreach (var other in others)
        {
            foreach (var finding in other.Findings)
            {
                var family = Family(finding.Kind);
                if (family is null || finding.Feature.Length == 0 || reported.Contains((family, finding.Feature)))
                    continue;
                var group = groups.FirstOrDefault(g => g.Family == family && g.Feature == finding.Feature);
                if (group.Seen is null)
                    groups.Add((family, finding.Feature, [(other, finding)]));
                else if (!group.Seen.Any(s => s.Other.Method == other.Method))
                    group.Seen.Add((other, finding));
            }
        }
        foreach (var (_, _, seen) in groups)
        {
            var (first, finding) = seen[0];
            var methods = seen.Select(s => s.Other.Method).ToList();
            var unseen = others.Where(o => o.Map is not null && !methods.Contains(o.Method)).Select(o => o.Method).ToList();
            string who = methods.Count == 1
                ? $"Seen by {first.Method} only: {PrimaryMethod}, whose maps the verdict reads, does not show it at this epoch"
                : $"Seen by {string.Join(" and ", methods)}, not by {PrimaryMethod}, whose maps the verdict reads";
            if (!primaryMapped)
                who = $"Seen by {string.Join(" and ", methods)}; {PrimaryMethod}, whose maps the verdict reads, has no map at this epoch";
            if (unseen.Count > 0)
                who += $" (nor {string.Join(", ", unseen)})";
            string severity = finding.Severity == VerdictKind.Halt && !_policy.SingleMethodMayHalt
                ? " It asks for Caution, not Halt, since the verdict's method does not see it (policy key singleMethodMayHalt)."
                : "";
            string agreement = seen.Where(s => s.Other.Map is not null && primaryMapped).Any()
                ? " Held-out importance ranks agree with " + PrimaryMethod + " at " + string.Join(", ", seen.Select(s => $"ρ = {MethodAgreement.Format(s.Other.Rho)} ({s.Other.Method})")) + "."
                : "";
            string caution = methods.Count == 1 ? " It may be an artefact of that method, or a swing the other methods miss." : "";
            var severityAsked = _policy.SingleMethodMayHalt ? finding.Severity : (VerdictKind)Math.Min((int)finding.Severity, (int)VerdictKind.Caution);
            yield return finding with
            {
                Severity = severityAsked,
                Evidence = who + ": " + Sentence(finding.Evidence) + caution + agreement + severity,
                SeenOnlyBy = [.. methods],
                Agreement = first.Rho,
            };
        }
    }

    private static string Sentence(string evidence)
    {
        evidence = evidence.TrimEnd();
        return evidence.EndsWith('.') ? evidence : evidence + ".";
    }

    // Findings about the same feature that different methods may name differently share a family (the kind's rule says which).
    private static string? Family(FindingKind kind) => kind.Info.Family;
}
