using System.Collections.Immutable;
using System.Globalization;
using DriftWatch.Attribution;
using DriftWatch.Model;

namespace DriftWatch.Detection;

/// <summary>
/// Reads a run's epochs in order and flags features whose importance diverges between the probe halves beyond its
/// noise floor, then lets the gate policy turn findings into a verdict. Incremental: each epoch costs the same,
/// however long the history.
/// </summary>
/// <remarks>
/// Rules: <b>leak</b> — training-minus-held-out share gap beyond the policy's widths of its bootstrap width W, or
/// label-alignment gap beyond its widths of W for a feature that is not identifier-like;
/// <b>memorised identifier</b> — label-alignment gap of an identifier-like categorical beyond its widths of W, or a
/// CUSUM of that gap in standard errors beyond the policy's threshold;
/// <b>dominant feature</b> — one feature's share leads the next by more than its widths of W on both halves
/// (a Caution), upgraded to <b>probable leak</b> when that categorical's attribution points at the true label on
/// nearly every probe row, held-out rows included; <b>overfitting</b> — Prechelt's GL above the policy's threshold, with the features whose
/// gap widened since the best-validation epoch as the diagnosis. Attribution rules become findings on their
/// <see cref="GatePolicy.Patience"/>-th consecutive flagged epoch. Not thread-safe.
/// </remarks>
public sealed class DivergenceDetector
{
    private const int TopK = 5;
    private const double OneSided95 = 1.645; // the normal quantile of a one-sided 95% lower bound
    private readonly RunContext _context;
    private readonly GatePolicy _policy;
    private readonly int[] _heldOutRows;
    private readonly int[] _trainingRows;
    private readonly bool[] _identifierLike;
    private readonly Dictionary<(FindingKind Kind, int Feature), int> _streaks = [];
    private readonly Dictionary<(FindingKind Kind, int Feature), int> _firstFlagged = [];
    private readonly Dictionary<int, (double Sum, int Since)> _identifierSums = [];
    private Cusum[]? _cusums;
    private bool[]? _shifted;
    private double[]? _previousShare;
    private double[]? _bestShare;
    private double[]? _bestGap;
    private double _bestValidation = double.PositiveInfinity;

    /// <summary>Creates a detector for one run.</summary>
    public DivergenceDetector(RunContext context, GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(context);
        ArgumentNullException.ThrowIfNull(policy);
        _context = context;
        _policy = policy;
        _heldOutRows = Enumerable.Range(0, context.HeldOutCount).ToArray();
        _trainingRows = Enumerable.Range(context.HeldOutCount, context.TrainingCount).ToArray();
        _identifierLike = Enumerable.Range(0, context.Schema.Count).Select(f => context.IsIdentifierLike(f, policy.IdentifierRareFraction)).ToArray();
    }

    /// <summary>Whether each feature is treated as identifier-like.</summary>
    public IReadOnlyList<bool> IdentifierLike => _identifierLike;

    /// <summary>Reads the next epoch and returns its statistics and verdict.</summary>
    public Assessment Observe(EpochEvidence evidence)
    {
        ArgumentNullException.ThrowIfNull(evidence);
        var findings = new List<Finding>(evidence.Reported);
        double validation = evidence.Metrics.TryGetValue("validation_loss", out double v) ? v : double.NaN;
        double gl = double.NaN;
        bool newBest = false;
        if (double.IsFinite(validation))
        {
            newBest = validation < _bestValidation;
            _bestValidation = Math.Min(_bestValidation, validation);
            gl = _bestValidation > 0 ? 100 * (validation / _bestValidation - 1) : double.NaN;
        }

        foreach (var (name, value) in evidence.Metrics.OrderBy(m => m.Key, StringComparer.Ordinal))
        {
            if (!double.IsFinite(value))
            {
                findings.Add(new Finding(FindingKind.NumericalTrouble, VerdictKind.Caution, "", value, 0, [evidence.Epoch, evidence.Epoch],
                    Format($"metric '{name}' is {value} at epoch {evidence.Epoch}")));
            }
        }
        var map = evidence.Map;
        bool trusted = map is not null && Trust(evidence.Epoch, map, findings);
        EpochStatistics statistics;
        if (trusted)
        {
            statistics = Measure(evidence.Epoch, map!, gl);
            if (evidence.Epoch >= _policy.WarmupEpochs)
                ApplyAttributionRules(evidence.Epoch, statistics, map!, findings);
            if (newBest || _bestShare is null)
            {
                _bestShare = statistics.ShareHeldOut;
                _bestGap = statistics.ShareGap;
            }
        }
        else
        {
            statistics = new EpochStatistics { Epoch = evidence.Epoch, Trusted = false, GeneralisationLoss = gl };
        }

        if (gl > _policy.GeneralisationLossThreshold)
            findings.Add(Overfitting(evidence.Epoch, gl, trusted ? statistics : null));

        return new Assessment(statistics, Judge(evidence.Epoch, findings));
    }

    private bool Trust(int epoch, AttributionMap map, List<Finding> findings)
    {
        int bad = map.Scores.Count(v => !float.IsFinite(v));
        if (bad > 0)
        {
            findings.Add(new Finding(FindingKind.NumericalTrouble, VerdictKind.Caution, "", bad, 0, [epoch, epoch],
                Format($"{bad} of {map.Scores.Length} attribution scores are NaN or infinite at epoch {epoch}; this epoch's maps are not trusted")));
            return false;
        }
        if (map.RelativeMeanDelta() is double relative && relative > _policy.DeltaTolerance)
        {
            findings.Add(new Finding(FindingKind.NumericalTrouble, VerdictKind.Caution, "", relative, _policy.DeltaTolerance, [epoch, epoch],
                Format($"mean convergence delta is {relative:P1} of mean |F(x) − F(x′)| at epoch {epoch}, above {_policy.DeltaTolerance:P0}; use more steps — this epoch's maps are not trusted")));
            return false;
        }
        return true;
    }

    private Verdict Judge(int epoch, List<Finding> findings)
    {
        var kind = findings.Count == 0 ? VerdictKind.Continue : findings.Max(f => f.Severity);
        var ordered = findings.OrderByDescending(f => f.Severity).ThenBy(f => f.Kind).ToImmutableArray();
        return new Verdict(epoch, kind, ordered.Select(f => f.Evidence).ToImmutableArray(), ordered);
    }

    private EpochStatistics Measure(int epoch, AttributionMap map, double gl)
    {
        int features = map.Features;
        var heldOut = HalfImportance.Compute(map, _heldOutRows, _context.Labels);
        var training = HalfImportance.Compute(map, _trainingRows, _context.Labels);
        var noise = Bootstrap(map, epoch);

        var gap = new double[features];
        for (int f = 0; f < features; f++)
            gap[f] = training.Share[f] - heldOut.Share[f];
        double[] alignmentGap = heldOut.Alignment is null || training.Alignment is null
            ? []
            : Enumerable.Range(0, features).Select(f => training.Alignment[f] - heldOut.Alignment[f]).ToArray();

        UpdateCusum(heldOut.Share, noise.ShareHeldOutWidth);
        double drift = double.NaN, jsd = double.NaN, jaccard = double.NaN;
        if (_previousShare is not null)
        {
            drift = 1 - Statistics.Spearman(_previousShare, heldOut.Share);
            jsd = heldOut.Share.Sum() > 0 && _previousShare.Sum() > 0 ? Statistics.JensenShannon(_previousShare, heldOut.Share) : double.NaN;
            jaccard = Statistics.TopKJaccard(_previousShare, heldOut.Share, Math.Min(TopK, features));
        }
        _previousShare = heldOut.Share;

        return new EpochStatistics
        {
            Epoch = epoch,
            Trusted = true,
            ShareHeldOut = heldOut.Share,
            ShareTraining = training.Share,
            ShareHeldOutWidth = noise.ShareHeldOutWidth,
            ShareTrainingWidth = noise.ShareTrainingWidth,
            ShareGap = gap,
            ShareGapWidth = noise.ShareGapWidth,
            AlignmentHeldOut = heldOut.Alignment ?? [],
            AlignmentTraining = training.Alignment ?? [],
            AlignmentGap = alignmentGap,
            AlignmentGapWidth = noise.AlignmentGapWidth,
            LeadWidthHeldOut = noise.DominanceWidthHeldOut,
            LeadWidthTraining = noise.DominanceWidthTraining,
            Shifted = (bool[])_shifted!.Clone(),
            Drift = drift,
            RankAgreementWithBest = _bestShare is null ? double.NaN : Statistics.Spearman(_bestShare, heldOut.Share),
            JensenShannonFromPrevious = jsd,
            TopFiveJaccard = jaccard,
            GeneralisationLoss = gl,
        };
    }

    private void UpdateCusum(double[] share, double[] width)
    {
        // Descriptive: the first attributed epoch after warm-up is the reference; one standard error ≈ W / 3.29
        // (a 90% normal interval spans ±1.645 σ).
        if (_cusums is null)
        {
            _cusums = share.Select((s, f) =>
            {
                double sigma = Math.Max(width[f] / 3.29, 1e-6);
                return new Cusum(s, _policy.CusumAllowance * sigma, _policy.CusumThreshold * sigma);
            }).ToArray();
            _shifted = new bool[share.Length];
            return;
        }
        for (int f = 0; f < share.Length; f++)
            _shifted![f] |= _cusums[f].Add(share[f]);
    }

    private sealed record Noise(double[] ShareHeldOutWidth, double[] ShareTrainingWidth, double[] ShareGapWidth, double[] AlignmentGapWidth, double DominanceWidthHeldOut, double DominanceWidthTraining);

    // Row bootstrap, each half resampled on its own: per resample, shares and alignments per half, then their gaps.
    // The 90% width (q95 − q05) of each statistic is its noise floor W.
    private Noise Bootstrap(AttributionMap map, int epoch)
    {
        int features = map.Features, b = _policy.BootstrapResamples;
        var random = new Random(unchecked(_policy.Seed * 1_000_003 + epoch));
        bool aligned = _context.HasBinaryLabels;
        var shareH = new double[b, features];
        var shareT = new double[b, features];
        var alignH = aligned ? new double[b, features] : null;
        var alignT = aligned ? new double[b, features] : null;
        var absSum = new double[features];
        var alignSum = new double[features];
        for (int r = 0; r < b; r++)
        {
            Resample(map, _heldOutRows, random, absSum, alignSum, shareH, alignH, r);
            Resample(map, _trainingRows, random, absSum, alignSum, shareT, alignT, r);
        }

        double Width(Func<int, double> statistic)
        {
            var values = new double[b];
            for (int r = 0; r < b; r++)
                values[r] = statistic(r);
            return Statistics.Quantile(values, 0.95) - Statistics.Quantile(values, 0.05);
        }

        var heldOutWidth = new double[features];
        var trainingWidth = new double[features];
        var gapWidth = new double[features];
        var alignmentGapWidth = aligned ? new double[features] : [];
        for (int f = 0; f < features; f++)
        {
            heldOutWidth[f] = Width(r => shareH[r, f]);
            trainingWidth[f] = Width(r => shareT[r, f]);
            gapWidth[f] = Width(r => shareT[r, f] - shareH[r, f]);
            if (aligned)
                alignmentGapWidth[f] = Width(r => alignT![r, f] - alignH![r, f]);
        }

        // Dominance: width of (share of top feature − share of runner-up) on each half, for the point-estimate top two.
        double Dominance(double[,] shares, int[] rows)
        {
            var point = HalfImportance.Compute(map, rows, null).Share;
            if (features < 2)
                return 0;
            var order = Enumerable.Range(0, features).OrderByDescending(f => point[f]).ThenBy(f => f).ToArray();
            return Width(r => shares[r, order[0]] - shares[r, order[1]]);
        }

        return new Noise(heldOutWidth, trainingWidth, gapWidth, alignmentGapWidth, Dominance(shareH, _heldOutRows), Dominance(shareT, _trainingRows));
    }

    private void Resample(AttributionMap map, int[] rows, Random random, double[] absSum, double[] alignSum, double[,] share, double[,]? align, int r)
    {
        int features = map.Features;
        Array.Clear(absSum);
        Array.Clear(alignSum);
        var labels = _context.Labels;
        for (int i = 0; i < rows.Length; i++)
        {
            int row = rows[random.Next(rows.Length)];
            double sign = align is null ? 0 : 2 * labels![row] - 1;
            int offset = row * features;
            for (int f = 0; f < features; f++)
            {
                double s = map.Scores[offset + f];
                absSum[f] += Math.Abs(s);
                alignSum[f] += s * sign;
            }
        }
        double total = absSum.Sum();
        for (int f = 0; f < features; f++)
        {
            share[r, f] = total > 0 ? absSum[f] / total : 0;
            if (align is not null)
                align[r, f] = absSum[f] > 0 ? alignSum[f] / absSum[f] : 0;
        }
    }

    private void ApplyAttributionRules(int epoch, EpochStatistics s, AttributionMap map, List<Finding> findings)
    {
        var names = _context.Schema.Features;
        int features = names.Length;

        for (int f = 0; f < features; f++)
        {
            // Two faces of a leak: the model leans on the feature more for training rows (share gap), or as much but
            // only there does it point at the label (alignment gap) — a leak that keeps value frequencies equal shows only the second.
            bool shareLeak = s.ShareGap[f] > _policy.LeakWidths * s.ShareGapWidth[f] && s.ShareGap[f] > _policy.LeakMinimumGap;
            bool alignmentLeak = !_identifierLike[f] && s.AlignmentGap.Length > 0
                && s.AlignmentGap[f] > _policy.LeakAlignmentWidths * s.AlignmentGapWidth[f] && s.AlignmentGap[f] > _policy.LeakMinimumAlignmentGap
                && s.ShareTraining[f] >= _policy.LeakMinimumShare;
            if (Streak(FindingKind.Leak, f, shareLeak || alignmentLeak, epoch) is int since)
            {
                string evidence = shareLeak
                    ? Format($"'{names[f].Name}' takes {s.ShareTraining[f]:P1} of attribution on training rows but {s.ShareHeldOut[f]:P1} on held-out rows (gap {s.ShareGap[f]:+0.000;-0.000}, noise floor {s.ShareGapWidth[f]:0.000}) since epoch {since}: the model leans on it for rows it trained on only — a leaked or memorised signal")
                    : Format($"'{names[f].Name}' points at the true label on training rows (alignment {s.AlignmentTraining[f]:+0.00;-0.00}) but not on held-out rows ({s.AlignmentHeldOut[f]:+0.00;-0.00}; gap noise floor {s.AlignmentGapWidth[f]:0.00}) since epoch {since}, with {s.ShareTraining[f]:P1} of training attribution: it carries the label only where the model trained — a leaked signal");
                findings.Add(new Finding(FindingKind.Leak, _policy.SeverityOf(FindingKind.Leak), names[f].Name,
                    shareLeak ? s.ShareGap[f] : s.AlignmentGap[f], shareLeak ? s.ShareGapWidth[f] : s.AlignmentGapWidth[f], Epochs(since, epoch), evidence));
            }

            if (!_identifierLike[f] || s.AlignmentGap.Length == 0)
                continue;
            bool memorised = s.AlignmentGap[f] > _policy.IdentifierWidths * s.AlignmentGapWidth[f];
            int? from = Streak(FindingKind.MemorisedIdentifier, f, memorised, epoch);
            // Memorisation creeps in: a one-sided CUSUM of the gap in standard errors (W / 3.29) accumulates small,
            // steady excesses that no single epoch shows beyond its noise floor (Page 1954).
            double z = s.AlignmentGap[f] / Math.Max(s.AlignmentGapWidth[f] / 3.29, 1e-9);
            var (sum, accumulating) = _identifierSums.GetValueOrDefault(f, (0, epoch));
            double next = Math.Max(0, sum + z - _policy.IdentifierCusumAllowance);
            if (sum == 0)
                accumulating = epoch; // a new excursion starts here
            _identifierSums[f] = (next, accumulating);
            bool accumulated = next > _policy.IdentifierCusumThreshold;
            if (from is null && !accumulated)
                continue;
            int start = from ?? accumulating;
            string how = from is not null
                ? Format($"beyond its noise floor ({s.AlignmentGapWidth[f]:0.00}) since epoch {start}")
                : Format($"by a steady excess over its noise floor accumulated since epoch {start} (CUSUM {next:0.0} standard errors, threshold {_policy.IdentifierCusumThreshold:0.#})");
            findings.Add(new Finding(FindingKind.MemorisedIdentifier, _policy.SeverityOf(FindingKind.MemorisedIdentifier), names[f].Name, s.AlignmentGap[f], s.AlignmentGapWidth[f], Epochs(start, epoch),
                Format($"identifier-like '{names[f].Name}' agrees with the label on training rows (alignment {s.AlignmentTraining[f]:+0.00;-0.00}) more than on held-out rows ({s.AlignmentHeldOut[f]:+0.00;-0.00}), ") + how + ": the model is memorising its values" + Replay(f, map)));
        }

        DominanceRule(epoch, s, map, findings);
    }

    private void DominanceRule(int epoch, EpochStatistics s, AttributionMap map, List<Finding> findings)
    {
        int features = s.ShareHeldOut.Length;
        if (features < 2)
            return;
        int Top(double[] share, int skip) => Enumerable.Range(0, features).Where(f => f != skip).OrderByDescending(f => share[f]).ThenBy(f => f).First();
        int top = Top(s.ShareHeldOut, -1);
        int runnerUp = Top(s.ShareHeldOut, top);
        int trainingTop = Top(s.ShareTraining, -1);
        int trainingRunnerUp = Top(s.ShareTraining, trainingTop);
        double lead = s.ShareHeldOut[top] - s.ShareHeldOut[runnerUp];
        double trainingLead = s.ShareTraining[trainingTop] - s.ShareTraining[trainingRunnerUp];
        double width = s.LeadWidthHeldOut;
        bool dominant = trainingTop == top
            && lead > _policy.DominanceWidths * width
            && trainingLead > _policy.DominanceWidths * s.LeadWidthTraining;
        if (Streak(FindingKind.DominantFeature, top, dominant, epoch) is not int since)
            return;

        string name = _context.Schema.Features[top].Name;
        var purity = Purity(top, map);
        if (purity is { } pure && pure.LowerBound >= _policy.PurityLowerBound && pure.HeldOutShare >= _policy.PurityLowerBound)
        {
            findings.Add(new Finding(FindingKind.ProbableLeak, _policy.SeverityOf(FindingKind.ProbableLeak), name, pure.LowerBound, _policy.PurityLowerBound, Epochs(since, epoch),
                Format($"'{name}' decides on both halves ({s.ShareHeldOut[top]:P1} held-out share, next {s.ShareHeldOut[runnerUp]:P1}), and its attribution points at the true label in {pure.Agree} of {pure.Rows} probe rows across {pure.Values} values ({pure.HeldOutAgree} of {pure.HeldOutRows} held-out; one-sided 95% Wilson lower bound {pure.LowerBound:0.00}): a categorical whose values nearly fix the label suggests a leak present in validation data too, which the loss cannot show")));
            return;
        }
        findings.Add(new Finding(FindingKind.DominantFeature, VerdictKind.Caution, name, lead, width, Epochs(since, epoch),
            Format($"'{name}' decides on both halves: {s.ShareHeldOut[top]:P1} of held-out attribution against {s.ShareHeldOut[runnerUp]:P1} for the next feature, since epoch {since}; may be genuine — check how it is produced")));
    }

    // Supporting evidence for a memorised identifier, never a rule on its own: a held-out row whose identifier value also
    // sits on a training probe row "replays" when the feature's attribution points at that training row's label (the
    // majority label when several rows share the value) rather than at its own. Only values shared within the probe set
    // can be checked, so the sentence says how many rows that was.
    private string Replay(int feature, AttributionMap map)
    {
        if (!_context.HasBinaryLabels)
            return "";
        var trainingVotes = new Dictionary<long, int>();
        foreach (int row in _trainingRows)
        {
            long id = _context.IdOf(row, feature);
            trainingVotes[id] = trainingVotes.GetValueOrDefault(id) + (_context.Labels![row] > 0.5f ? 1 : -1);
        }
        int shared = 0, replayed = 0, differing = 0, replayedDiffering = 0;
        foreach (int row in _heldOutRows)
        {
            if (!trainingVotes.TryGetValue(_context.IdOf(row, feature), out int votes) || votes == 0)
                continue;
            double score = map[row, feature];
            bool towardsTraining = score * votes > 0;
            shared++;
            if (towardsTraining)
                replayed++;
            if ((_context.Labels![row] > 0.5f ? 1 : -1) * votes < 0)
            {
                differing++;
                if (towardsTraining)
                    replayedDiffering++;
            }
        }
        if (shared == 0)
            return "; replay cannot be checked: no held-out probe row shares a value with a training probe row";
        string text = Format($"; replay (supporting evidence): on {replayed} of {shared} held-out rows whose value also sits on training probe rows, the attribution points at that training label");
        return differing == 0
            ? text
            : text + Format($", including {replayedDiffering} of the {differing} whose own label differs");
    }

    private sealed record PurityResult(int Agree, int Rows, int HeldOutAgree, int HeldOutRows, int Values, double LowerBound)
    {
        public double HeldOutShare => HeldOutRows == 0 ? 0 : (double)HeldOutAgree / HeldOutRows;
    }

    // For a categorical feature: over the whole probe set (both halves), how often the sign of the feature's attribution
    // agrees with the row's ±1 label, with its one-sided 95% Wilson lower bound. The rule runs only when the feature
    // decides on both halves, so both halves are evidence of the same property: a leak makes every value point at the
    // label; a genuine feature, however strong, has values whose effect is weak or is overruled by other features.
    // Pooling doubles the rows behind the bound; the held-out half alone must also reach it (as a plain share), so a
    // feature that fixes the label only on memorised training rows cannot pass on the training half's strength.
    private PurityResult? Purity(int feature, AttributionMap map)
    {
        if (_context.CategoricalInput[feature] < 0 || !_context.HasBinaryLabels)
            return null;
        var values = new HashSet<long>();
        int Agreeing(int[] rows)
        {
            int agree = 0;
            foreach (int row in rows)
            {
                values.Add(_context.IdOf(row, feature));
                if (map[row, feature] * (2 * _context.Labels![row] - 1) > 0)
                    agree++;
            }
            return agree;
        }
        int heldOut = Agreeing(_heldOutRows);
        int training = Agreeing(_trainingRows);
        int rows = _heldOutRows.Length + _trainingRows.Length;
        return _heldOutRows.Length == 0
            ? null
            : new PurityResult(heldOut + training, rows, heldOut, _heldOutRows.Length, values.Count, Statistics.WilsonLowerBound(heldOut + training, rows, OneSided95));
    }

    private Finding Overfitting(int epoch, double gl, EpochStatistics? s)
    {
        string diagnosis = "";
        if (s is not null && _bestGap is not null)
        {
            var widened = Enumerable.Range(0, s.ShareGap.Length)
                .Where(f => s.ShareGap[f] - _bestGap[f] > s.ShareGapWidth[f])
                .OrderByDescending(f => s.ShareGap[f] - _bestGap[f])
                .Take(3)
                .Select(f => Format($"'{_context.Schema.Features[f].Name}' (gap {_bestGap[f]:+0.000;-0.000} → {s.ShareGap[f]:+0.000;-0.000})"))
                .ToList();
            diagnosis = widened.Count == 0
                ? "; no feature's training/held-out gap widened beyond its noise floor — the overfitting is diffuse"
                : "; features whose training/held-out gap widened since the best epoch: " + string.Join(", ", widened);
        }
        return new Finding(FindingKind.Overfitting, _policy.SeverityOf(FindingKind.Overfitting), "", gl, _policy.GeneralisationLossThreshold, [epoch, epoch],
            Format($"validation loss is {gl:0.0}% above its best so far (generalisation loss, threshold {_policy.GeneralisationLossThreshold:0.#}%)") + diagnosis);
    }

    // Returns the first epoch of the current streak once it reaches the policy's patience; null otherwise.
    private int? Streak(FindingKind kind, int feature, bool flagged, int epoch)
    {
        var key = (kind, feature);
        if (!flagged)
        {
            _streaks.Remove(key);
            _firstFlagged.Remove(key);
            return null;
        }
        int streak = _streaks.GetValueOrDefault(key) + 1;
        _streaks[key] = streak;
        if (streak == 1)
            _firstFlagged[key] = epoch;
        return streak >= _policy.Patience ? _firstFlagged[key] : null;
    }

    private static ImmutableArray<int> Epochs(int from, int to) => [from, to];

    private static string Format(FormattableString text) => text.ToString(CultureInfo.InvariantCulture);
}
