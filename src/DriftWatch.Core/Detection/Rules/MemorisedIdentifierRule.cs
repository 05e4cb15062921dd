using static DriftWatch.Detection.Rules.RuleText;

namespace DriftWatch.Detection.Rules;

/// <summary>The memorised-identifier rule's settings, read from the policy.</summary>
/// <param name="Widths">Alignment gap beyond this many widths of its noise floor (policy <c>identifierWidths</c>).</param>
/// <param name="CusumAllowance">CUSUM allowance K, in standard errors of the gap (policy <c>identifierCusumAllowance</c>).</param>
/// <param name="CusumThreshold">CUSUM decision interval H, in standard errors (policy <c>identifierCusumThreshold</c>).</param>
public sealed record MemorisedIdentifierSettings(double Widths, double CusumAllowance, double CusumThreshold)
{
    /// <summary>The settings a policy gives.</summary>
    public static MemorisedIdentifierSettings From(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return new(policy.IdentifierWidths, policy.IdentifierCusumAllowance, policy.IdentifierCusumThreshold);
    }
}

/// <summary>
/// <b>Memorised identifier</b>: the label-alignment gap of an identifier-like categorical beyond its widths of the noise
/// floor W, or a one-sided CUSUM of that gap in standard errors beyond the policy's threshold (Page 1954).
/// </summary>
/// <param name="settings">What the rule reads from the policy.</param>
/// <param name="patience">Consecutive flagged epochs before a finding (the policy's patience).</param>
public sealed class MemorisedIdentifierRule(MemorisedIdentifierSettings settings, int patience) : IFindingRule
{
    private readonly MemorisedIdentifierSettings _settings = settings ?? throw new ArgumentNullException(nameof(settings));
    private readonly Streaks _streaks = new(patience);
    private readonly Dictionary<int, (double Sum, int Since)> _sums = [];

    /// <summary>The memorised-identifier kind's words and advice.</summary>
    public static FindingKindInfo Kind { get; } = new(
        FindingKind.MemorisedIdentifier,
        "memorised identifier",
        "An identifier-like categorical whose attributions agree with training labels but not held-out ones.",
        "gap",
        SeverityRule.PolicyDecides,
        EvaluationRole.NamesFault,
        a => $"{a.Features} behaves like an identifier the model memorised: consider dropping it or grouping its rare values. The feature chart shows the rows it separates.")
    {
        Measure = new FindingMeasure("alignment gap", "noise floor", "") { Statistic = "alignment_gap", Unit = "alignment" },
    };

    private static string Sentence(string name, EpochStatistics s, int f, string how) =>
        Format($"identifier-like '{name}' agrees with the label on training rows (alignment {s.AlignmentTraining[f]:+0.00;-0.00}) ")
        + Format($"more than on held-out rows ({s.AlignmentHeldOut[f]:+0.00;-0.00}), ") + how + ": the model is memorising its values";

    private static string BeyondFloor(EpochStatistics s, int f, int start) => Format($"beyond its noise floor ({s.AlignmentGapWidth[f]:0.00}) since epoch {start}");

    private static string Accumulated(int start, double sum, double threshold) =>
        Format($"by a steady excess over its noise floor accumulated since epoch {start} (CUSUM {sum:0.0} standard errors, threshold {threshold:0.#})");

    /// <inheritdoc/>
    public FindingKindInfo Info => Kind;

    /// <inheritdoc/>
    public RuleStage Stage => RuleStage.Attribution;

    /// <inheritdoc/>
    public void Evaluate(EpochView epoch, IList<Finding> findings)
    {
        ArgumentNullException.ThrowIfNull(epoch);
        ArgumentNullException.ThrowIfNull(findings);
        var s = epoch.Statistics!;
        var run = epoch.Run;
        if (s.AlignmentGap.Length == 0)
            return;
        for (int f = 0; f < s.AlignmentGap.Length; f++)
        {
            if (!run.IdentifierLike[f])
                continue;
            bool memorised = s.AlignmentGap[f] > _settings.Widths * s.AlignmentGapWidth[f];
            int? from = _streaks.Observe(f, memorised, epoch.Epoch);
            // Memorisation creeps in: a one-sided CUSUM of the gap in standard errors (W / 3.29) accumulates small,
            // steady excesses that no single epoch shows beyond its noise floor (Page 1954).
            double z = s.AlignmentGap[f] / Math.Max(s.AlignmentGapWidth[f] / 3.29, 1e-9);
            var (sum, accumulating) = _sums.GetValueOrDefault(f, (0, epoch.Epoch));
            double next = Math.Max(0, sum + z - _settings.CusumAllowance);
            if (sum == 0)
                accumulating = epoch.Epoch; // a new excursion starts here
            _sums[f] = (next, accumulating);
            bool accumulated = next > _settings.CusumThreshold;
            if (from is null && !accumulated)
                continue;
            int start = from ?? accumulating;
            string name = run.FeatureName(f);
            string how = from is not null ? BeyondFloor(s, f, start) : Accumulated(start, next, _settings.CusumThreshold);
            findings.Add(new Finding(FindingKind.MemorisedIdentifier, Kind.SeverityUnder(run.Policy), name, s.AlignmentGap[f], s.AlignmentGapWidth[f], new EpochSpan(start, epoch.Epoch),
                Sentence(name, s, f, how) + Echoes(run, f, epoch.Map!)));
        }
    }

    // Supporting evidence, never a rule on its own: a held-out row whose identifier value also sits on a training probe
    // row "echoes" that row when the feature's attribution points at the training row's label (the majority label when
    // several rows share the value) rather than at its own. Only values shared within the probe set can be checked, so
    // the sentence says how many rows that was. With the row's true class as target a score points towards the row's own
    // class when positive, so a held-out row points at the training rows' class when its score is positive and that class
    // is its own, or negative and it is not; with a one-sign direction per row (binary, one class's output, a continuous
    // target) the votes are the training rows' directions summed.
    private static string Echoes(DetectorRun run, int feature, Attribution.AttributionMap map)
    {
        var context = run.Context;
        if (context.AlignmentSigns is not { } signs)
            return "";
        bool ownClass = context.Target.IsPerRow;
        int Vote(int row) => ownClass ? Probing.LabelKinds.ClassOf(context.Labels![row]) : (int)signs[row];
        var trainingVotes = new Dictionary<long, Dictionary<int, int>>();
        foreach (int row in run.TrainingRows)
        {
            long id = context.IdOf(row, feature);
            if (!trainingVotes.TryGetValue(id, out var votes))
                trainingVotes[id] = votes = [];
            votes[Vote(row)] = votes.GetValueOrDefault(Vote(row)) + 1;
        }
        int shared = 0, echoed = 0, differing = 0, echoedDiffering = 0;
        foreach (int row in run.HeldOutRows)
        {
            if (!trainingVotes.TryGetValue(context.IdOf(row, feature), out var votes))
                continue;
            // The training rows' label: the majority class, or for one-sign directions the sign of their sum (none on a tie).
            int training;
            if (ownClass)
            {
                var top = votes.OrderByDescending(v => v.Value).ThenBy(v => v.Key).ToArray();
                if (top.Length > 1 && top[0].Value == top[1].Value)
                    continue;
                training = top[0].Key;
            }
            else
            {
                training = Math.Sign(votes.Sum(v => v.Key * v.Value));
                if (training == 0)
                    continue;
            }
            double score = map[row, feature];
            bool differs = ownClass ? training != Vote(row) : Vote(row) * training < 0;
            bool towardsTraining = ownClass ? (differs ? score < 0 : score > 0) : score * training > 0;
            shared++;
            if (towardsTraining)
                echoed++;
            if (differs)
            {
                differing++;
                if (towardsTraining)
                    echoedDiffering++;
            }
        }
        if (shared == 0)
            return "; echo cannot be checked: no held-out probe row shares a value with a training probe row";
        string text = Format($"; echo (supporting evidence): on {echoed} of {shared} held-out rows whose value also sits on training probe rows, the attribution points at that training label");
        return differing == 0
            ? text
            : text + Format($", including {echoedDiffering} of the {differing} whose own label differs");
    }
}
