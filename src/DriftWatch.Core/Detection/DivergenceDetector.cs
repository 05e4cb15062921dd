using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Detection.Rules;

namespace DriftWatch.Detection;

/// <summary>
/// Reads a run's epochs in order and flags features whose importance diverges between the probe halves beyond its
/// noise floor, then lets the gate policy turn findings into a verdict. Incremental: each epoch costs the same,
/// however long the history.
/// </summary>
/// <remarks>
/// The epoch is a short pipeline: the health rules read the metrics and the map; the shared statistics are measured
/// once (shares and label alignment per half, their row-bootstrap noise floors, drift and CUSUM); the attribution rules
/// read them from the first epoch after warm-up; the loss rules read the generalisation loss. The rules and their
/// words are in <see cref="FindingRules"/>; attribution rules become findings on their <see cref="GatePolicy.Patience"/>-th
/// consecutive flagged epoch. Not thread-safe.
/// </remarks>
public sealed class DivergenceDetector
{
    private const int TopK = 5;
    private readonly RunContext _context;
    private readonly GatePolicy _policy;
    private readonly DetectorRun _run;
    private readonly int[] _heldOutRows;
    private readonly int[] _trainingRows;
    private readonly ImmutableArray<IFindingRule> _rules;
    private readonly HalfExchangeNull? _halfExchange;
    private Cusum[]? _cusums;
    private bool[]? _shifted;
    private double[]? _previousShare;
    private double[]? _bestShare;
    private ImmutableArray<double> _bestGap = [];
    private double _bestValidation = double.PositiveInfinity;
    private bool _notCheckedSaid;
    private int? _firstEpoch;

    /// <summary>Creates a detector for one run.</summary>
    public DivergenceDetector(RunContext context, GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(context);
        ArgumentNullException.ThrowIfNull(policy);
        _context = context;
        _policy = policy;
        _run = new DetectorRun(context, policy);
        _heldOutRows = [.. _run.HeldOutRows];
        _trainingRows = [.. _run.TrainingRows];
        _rules = FindingRules.Create(policy);
        _halfExchange = context.SplitCheck is null ? null : new HalfExchangeNull(context.HeldOutCount, context.TrainingCount, policy.HalfExchangeResplits, policy.Seed);
    }

    /// <summary>Whether each feature is treated as identifier-like.</summary>
    public IReadOnlyList<bool> IdentifierLike => _run.IdentifierLike;

    /// <summary>Reads the next epoch and returns its statistics and verdict.</summary>
    public Assessment Observe(EpochInput input)
    {
        ArgumentNullException.ThrowIfNull(input);
        _firstEpoch ??= input.Epoch;
        var findings = new List<Finding>(input.Reported);
        var (gl, newBest) = GeneralisationLoss(input.Metrics);
        var view = new EpochView(_run, input.Epoch, input.Metrics, input.Map) { GeneralisationLoss = gl };

        Run(RuleStage.Health, view, findings);
        bool attributed = false;
        if (view.Trusted)
        {
            view.Statistics = Measure(input.Epoch, view.Map!, gl);
            if (!InWarmup(input.Epoch))
            {
                Run(RuleStage.Attribution, view, findings);
                attributed = true;
            }
            if (newBest || _bestShare is null)
            {
                _bestShare = [.. view.Statistics.ShareHeldOut];
                _bestGap = view.Statistics.ShareGap;
            }
        }
        view.BestShareGap = _bestGap;
        Run(RuleStage.Loss, view, findings);

        var statistics = view.Trusted ? view.Statistics! : new EpochStatistics { Epoch = input.Epoch, Trusted = false, GeneralisationLoss = gl };
        var verdict = Judge(input.Epoch, findings);
        if (attributed && !_notCheckedSaid && _context.NotChecked is { } note)
        {
            // Said once, in the first verdict the attribution rules read, so a silent rule is never mistaken for a quiet one.
            _notCheckedSaid = true;
            verdict = verdict with { Reasons = verdict.Reasons.Add(note) };
        }
        return new Assessment(statistics, verdict);
    }

    // Whether the epoch is one of the run's first WarmupEpochs epochs, counted from the first epoch this detector read, as
    // users number them: with epochs 1, 2, 3 … a warm-up of 1 ignores epoch 1, a warm-up of 0 none.
    private bool InWarmup(int epoch) => epoch - _firstEpoch!.Value < _policy.WarmupEpochs;

    private void Run(RuleStage stage, EpochView view, List<Finding> findings)
    {
        foreach (var rule in _rules)
        {
            if (rule.Stage == stage)
                rule.Evaluate(view, findings);
        }
    }

    // Prechelt's GL(t) = 100 (E_va(t) / E_opt(t) − 1), E_opt the lowest validation loss so far (Prechelt 1998).
    private (double Gl, bool NewBest) GeneralisationLoss(IReadOnlyDictionary<string, double> metrics)
    {
        double validation = metrics.TryGetValue(MetricKeys.ValidationLoss, out double v) ? v : double.NaN;
        if (!double.IsFinite(validation))
            return (double.NaN, false);
        bool newBest = validation < _bestValidation;
        _bestValidation = Math.Min(_bestValidation, validation);
        return (_bestValidation > 0 ? 100 * (validation / _bestValidation - 1) : double.NaN, newBest);
    }

    private static Verdict Judge(int epoch, List<Finding> findings)
    {
        var kind = findings.Count == 0 ? VerdictKind.Continue : findings.Max(f => f.Severity);
        var ordered = findings.OrderByDescending(f => f.Severity).ThenBy(f => f.Kind).ToImmutableArray();
        return new Verdict(epoch, kind, ordered.Select(f => f.Evidence).ToImmutableArray(), ordered);
    }

    private EpochStatistics Measure(int epoch, AttributionMap map, double gl)
    {
        int features = map.Features;
        var heldOut = HalfImportance.WithSigns(map, _heldOutRows, _context.AlignmentSigns);
        var training = HalfImportance.WithSigns(map, _trainingRows, _context.AlignmentSigns);
        var noise = Bootstrap(map, epoch);

        var gap = new double[features];
        for (int f = 0; f < features; f++)
            gap[f] = training.Share[f] - heldOut.Share[f];
        double[] alignmentGap = heldOut.Alignment is not { } heldOutAlignment || training.Alignment is not { } trainingAlignment
            ? []
            : Enumerable.Range(0, features).Select(f => trainingAlignment[f] - heldOutAlignment[f]).ToArray();

        UpdateCusum(heldOut.Share, noise.ShareHeldOutWidth);
        double drift = double.NaN, jsd = double.NaN, jaccard = double.NaN;
        if (_previousShare is not null)
        {
            drift = 1 - Statistics.Spearman(_previousShare, heldOut.Share);
            jsd = heldOut.Share.Sum() > 0 && _previousShare.Sum() > 0 ? Statistics.JensenShannon(_previousShare, heldOut.Share) : double.NaN;
            jaccard = Statistics.TopKJaccard(_previousShare, heldOut.Share, Math.Min(TopK, features));
        }
        _previousShare = [.. heldOut.Share];
        var (shareP, alignmentP) = _halfExchange?.PValues(map, _context.AlignmentSigns) ?? ([], []);

        return new EpochStatistics
        {
            Epoch = epoch,
            Trusted = true,
            ShareHeldOut = heldOut.Share,
            ShareTraining = training.Share,
            ShareHeldOutWidth = [.. noise.ShareHeldOutWidth],
            ShareTrainingWidth = [.. noise.ShareTrainingWidth],
            ShareGap = [.. gap],
            ShareGapWidth = [.. noise.ShareGapWidth],
            AlignmentHeldOut = heldOut.Alignment ?? [],
            AlignmentTraining = training.Alignment ?? [],
            AlignmentGap = [.. alignmentGap],
            AlignmentGapWidth = [.. noise.AlignmentGapWidth],
            ShareGapPValue = shareP,
            AlignmentGapPValue = alignmentP,
            LeadWidthHeldOut = noise.DominanceWidthHeldOut,
            LeadWidthTraining = noise.DominanceWidthTraining,
            Shifted = [.. _shifted!],
            Drift = drift,
            RankAgreementWithBest = _bestShare is null ? double.NaN : Statistics.Spearman(_bestShare, heldOut.Share),
            JensenShannonFromPrevious = jsd,
            TopFiveJaccard = jaccard,
            GeneralisationLoss = gl,
        };
    }

    private void UpdateCusum(ImmutableArray<double> share, double[] width)
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
        bool aligned = _context.AlignmentSigns is not null;
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
        var signs = _context.AlignmentSigns;
        for (int i = 0; i < rows.Length; i++)
        {
            int row = rows[random.Next(rows.Length)];
            double sign = align is null ? 0 : signs!.Value[row];
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
}
