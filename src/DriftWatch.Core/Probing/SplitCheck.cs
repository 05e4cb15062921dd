using System.Collections.Immutable;
using DriftWatch.Detection;

namespace DriftWatch.Probing;

/// <summary>Whether a raw input of a probe row is a dense value or a categorical id.</summary>
public enum RawInputKind
{
    /// <summary>A dense float input (the n-th dense input is the schema's n-th dense feature).</summary>
    Dense = 0,

    /// <summary>A categorical id input (the n-th categorical input is the schema's n-th categorical feature).</summary>
    Categorical = 1,
}

/// <summary>How the split-consistency check runs: row caps, permutations, encodings and its error rate.</summary>
public sealed record SplitCheckOptions
{
    /// <summary>The built-in options.</summary>
    public static SplitCheckOptions Default { get; } = new();

    /// <summary>Most rows used from each side (a seeded subsample of a larger side). Default 5,000; at least 20.</summary>
    public int MaximumRowsPerSide { get; init => field = Require(value, 20, 10_000_000, nameof(MaximumRowsPerSide)); } = 5_000;

    /// <summary>Fewest rows each side needs for the check to run. Default 20; at least 10.</summary>
    public int MinimumRowsPerSide { get; init => field = Require(value, 10, 10_000_000, nameof(MinimumRowsPerSide)); } = 20;

    /// <summary>
    /// Side exchanges B of the permutation null, drawn with <see cref="Seed"/>. Default 499; at least 19. Raised to
    /// ⌈2 m / q⌉ − 1 for m inputs when smaller, so the smallest p-value possible can pass Benjamini–Hochberg's first threshold q / m.
    /// </summary>
    public int Permutations { get; init => field = Require(value, 19, 100_000, nameof(Permutations)); } = 499;

    /// <summary>Folds of the out-of-fold target encoding. Default 5; 2 to 20.</summary>
    public int Folds { get; init => field = Require(value, 2, 20, nameof(Folds)); } = 5;

    /// <summary>Bins of a dense input, cut at the pooled quantiles of both sides. Default 10; 2 to 64.</summary>
    public int DenseBins { get; init => field = Require(value, 2, 64, nameof(DenseBins)); } = 10;

    /// <summary>
    /// Most values of a categorical encoded on their own (the most frequent over both sides, each with at least two rows);
    /// the rest share one level. Default 256; 2 to 4,096.
    /// </summary>
    public int MaximumLevels { get; init => field = Require(value, 2, 4096, nameof(MaximumLevels)); } = 256;

    /// <summary>Pseudo-rows of the side's label rate each value's encoding is smoothed towards. Default 10; ≥ 0.</summary>
    public double Smoothing
    {
        get;
        init => field = double.IsFinite(value) && value >= 0 ? value : throw new DriftWatchException($"split check: {nameof(Smoothing)} must be a finite number ≥ 0; got {value}");
    } = 10;

    /// <summary>False discovery rate q of the Benjamini–Hochberg step across inputs. Default 0.05; in (0, 1).</summary>
    public double FalseDiscoveryRate
    {
        get;
        init => field = value is > 0 and < 1 ? value : throw new DriftWatchException($"split check: {nameof(FalseDiscoveryRate)} must be in (0, 1); got {value}");
    } = 0.05;

    /// <summary>
    /// Effect-size bound: an input fails only when its AUC gap (training minus held-out) is also at least this. Default 0.02;
    /// in [0, 1).
    /// </summary>
    public double MinimumGap
    {
        get;
        init => field = value is >= 0 and < 1 ? value : throw new DriftWatchException($"split check: {nameof(MinimumGap)} must be in [0, 1); got {value}");
    } = 0.02;

    /// <summary>Seed of the subsample, the folds and the side exchanges. Default 1.</summary>
    public int Seed { get; init; } = 1;

    private static int Require(int value, int min, int max, string name) =>
        value >= min && value <= max ? value : throw new DriftWatchException($"split check: {name} must be between {min} and {max}; got {value}");
}

/// <summary>One raw input's result in the split-consistency check.</summary>
/// <param name="Kind">Dense or categorical.</param>
/// <param name="Index">Its index among the raw inputs of its kind.</param>
/// <param name="TrainingScore">How well the input alone predicts the label on training rows (out-of-fold AUC; 0.5 is chance).</param>
/// <param name="HeldOutScore">The same on held-out rows.</param>
/// <param name="PValue">Permutation p-value of the gap (sides exchanged, sizes kept), (1 + #null ≥ observed) / (B + 1).</param>
/// <param name="NullUpper">The null's 95th percentile of the gap.</param>
/// <param name="Fails">Whether the input fails the check: rejected by Benjamini–Hochberg at the check's q and gap at least the minimum.</param>
public sealed record SplitCheckInput(RawInputKind Kind, int Index, double TrainingScore, double HeldOutScore, double PValue, double NullUpper, bool Fails)
{
    /// <summary>Training score minus held-out score: how much better the input predicts the label where the model trains.</summary>
    public double Gap => TrainingScore - HeldOutScore;
}

/// <summary>
/// The split-consistency check of a probe's source rows: per raw input, how well the input alone predicts the label on the
/// training rows and on the held-out rows, and whether the difference is beyond what exchanging rows between the sides gives.
/// </summary>
/// <param name="Score">How the score was computed for these labels, in words.</param>
/// <param name="TrainingRowsUsed">Training rows the check read (after the cap).</param>
/// <param name="HeldOutRowsUsed">Held-out rows the check read.</param>
/// <param name="Permutations">Side exchanges B of the null.</param>
/// <param name="FalseDiscoveryRate">The q at which <see cref="SplitCheckInput.Fails"/> was decided.</param>
/// <param name="MinimumGap">The effect-size bound at which it was decided.</param>
/// <param name="Inputs">Every dense input in order, then every categorical input.</param>
public sealed record SplitCheckResult(string Score, int TrainingRowsUsed, int HeldOutRowsUsed, int Permutations, double FalseDiscoveryRate, double MinimumGap, ImmutableArray<SplitCheckInput> Inputs)
{
    /// <summary>The input's result, or null when the check has no such input.</summary>
    public SplitCheckInput? Find(RawInputKind kind, int index) => Inputs.FirstOrDefault(i => i.Kind == kind && i.Index == index);

    /// <summary>The same p-values and gaps decided again at another q and effect-size bound (Benjamini–Hochberg across the inputs).</summary>
    public SplitCheckResult DecidedAt(double falseDiscoveryRate, double minimumGap)
    {
        var rejected = MultipleTesting.BenjaminiHochberg(Inputs.Select(i => i.PValue).ToArray(), falseDiscoveryRate);
        return this with
        {
            FalseDiscoveryRate = falseDiscoveryRate,
            MinimumGap = minimumGap,
            Inputs = [.. Inputs.Select((input, k) => input with { Fails = rejected[k] && input.Gap >= minimumGap })],
        };
    }
}

/// <summary>
/// Runs the split-consistency check, model-free: it tells a column that carries the label only where the model trains (a
/// leak) from a genuine feature, which relates to the label the same way on both sides.
/// </summary>
/// <remarks>
/// Each raw input is coded as levels: a dense input by bins cut at the pooled quantiles of both sides, a categorical by its
/// most frequent values (the rest one shared level). On each side on its own, every row gets an out-of-fold target encoding
/// (its level's label rate over the side's other folds, smoothed towards the side's label rate), and the side's score is
/// the AUC of that encoding against the label (Hanley &amp; McNeil 1982; encodings are grouped into 256 equal-width buckets
/// so an AUC costs one pass, ties counted half). K classes score the macro average of one-vs-rest AUCs; a continuous target
/// the AUC against "label above the pooled median". The statistic is training score minus held-out score; its null
/// exchanges rows between the sides at random, keeping the side sizes and every row's fold.
/// </remarks>
public static class SplitCheck
{
    private const int Buckets = 256;

    /// <summary>Most classes the check scores (macro one-vs-rest); labels with more classes are not checked.</summary>
    public const int MaximumClasses = 50;

    /// <summary>
    /// Checks every raw input of <paramref name="heldOut"/> and <paramref name="training"/>; null when the rows have no
    /// labels, no finite labels of a usable kind, more than <see cref="MaximumClasses"/> classes, or fewer than <see cref="SplitCheckOptions.MinimumRowsPerSide"/> rows on a side.
    /// </summary>
    public static SplitCheckResult? Run(ProbeRows heldOut, ProbeRows training, SplitCheckOptions options)
    {
        ArgumentNullException.ThrowIfNull(heldOut);
        ArgumentNullException.ThrowIfNull(training);
        ArgumentNullException.ThrowIfNull(options);
        if (heldOut.Labels is null || training.Labels is null)
            return null;
        var random = new Random(options.Seed);
        int[] trainingRows = Usable(training, options.MaximumRowsPerSide, random);
        int[] heldOutRows = Usable(heldOut, options.MaximumRowsPerSide, random);
        if (trainingRows.Length < options.MinimumRowsPerSide || heldOutRows.Length < options.MinimumRowsPerSide)
            return null;

        // Pooled rows: training first, then held-out.
        int n = trainingRows.Length + heldOutRows.Length, nTraining = trainingRows.Length;
        var labels = new float[n];
        for (int i = 0; i < nTraining; i++)
            labels[i] = training.Labels[trainingRows[i]];
        for (int i = 0; i < heldOutRows.Length; i++)
            labels[nTraining + i] = heldOut.Labels[heldOutRows[i]];
        var (groups, classes, score) = Groups(labels);
        if (groups is null)
            return null;

        var folds = new int[n];
        var order = Enumerable.Range(0, n).ToArray();
        random.Shuffle(order);
        for (int i = 0; i < n; i++)
            folds[order[i]] = i % options.Folds;

        var columns = new List<(RawInputKind Kind, int Index, int[] Codes, int Levels)>();
        for (int d = 0; d < training.DenseCount; d++)
        {
            var values = new float[n];
            for (int i = 0; i < nTraining; i++)
                values[i] = training.Dense[trainingRows[i] * training.DenseCount + d];
            for (int i = 0; i < heldOutRows.Length; i++)
                values[nTraining + i] = heldOut.Dense[heldOutRows[i] * heldOut.DenseCount + d];
            var (codes, levels) = Bin(values, options.DenseBins);
            columns.Add((RawInputKind.Dense, d, codes, levels));
        }
        for (int c = 0; c < training.CategoricalCount; c++)
        {
            var values = new long[n];
            for (int i = 0; i < nTraining; i++)
                values[i] = training.Categorical[trainingRows[i] * training.CategoricalCount + c];
            for (int i = 0; i < heldOutRows.Length; i++)
                values[nTraining + i] = heldOut.Categorical[heldOutRows[i] * heldOut.CategoricalCount + c];
            var (codes, levels) = Levels(values, options.MaximumLevels);
            columns.Add((RawInputKind.Categorical, c, codes, levels));
        }

        int m = columns.Count;
        int permutations = Math.Max(options.Permutations, (int)Math.Ceiling(2.0 * m / options.FalseDiscoveryRate) - 1);
        var cells = columns.Select(col => Cells(col.Codes, folds, options.Folds)).ToArray();
        var scorers = columns.Select(col => new Scorer(col.Levels, options.Folds, classes, options.Smoothing)).ToArray();

        // The smaller side is accumulated; the other side's counts are the pooled counts minus it.
        bool trainingSmaller = nTraining <= n - nTraining;
        int small = trainingSmaller ? nTraining : n - nTraining;
        var observedRows = trainingSmaller ? Enumerable.Range(0, nTraining).ToArray() : Enumerable.Range(nTraining, n - nTraining).ToArray();
        var observed = new double[m, 2];
        for (int k = 0; k < m; k++)
        {
            var (t, h) = scorers[k].Scores(cells[k], groups, observedRows, trainingSmaller);
            observed[k, 0] = t;
            observed[k, 1] = h;
        }

        var nullGaps = new double[permutations, m];
        Parallel.For(0, permutations, () => (Pool: new int[n], Scorers: columns.Select(col => new Scorer(col.Levels, options.Folds, classes, options.Smoothing)).ToArray()), (b, _, local) =>
        {
            // A fresh, seeded partial Fisher–Yates per exchange, so the draws do not depend on which thread ran them.
            var pick = new Random(HashCode.Combine(options.Seed, b, 0x5eed));
            var pool = local.Pool;
            for (int i = 0; i < n; i++)
                pool[i] = i;
            for (int i = 0; i < small; i++)
            {
                int j = pick.Next(i, n);
                (pool[i], pool[j]) = (pool[j], pool[i]);
            }
            var side = pool.AsSpan(0, small).ToArray();
            for (int k = 0; k < m; k++)
            {
                var (t, h) = local.Scorers[k].Scores(cells[k], groups, side, trainingSmaller);
                nullGaps[b, k] = t - h;
            }
            return local;
        }, _ => { });

        var pValues = new double[m];
        var upper = new double[m];
        for (int k = 0; k < m; k++)
        {
            double gap = observed[k, 0] - observed[k, 1];
            var column = new double[permutations];
            int exceeding = 0;
            for (int b = 0; b < permutations; b++)
            {
                column[b] = nullGaps[b, k];
                // A NaN gap (a side without both classes) never counts as exceeding.
                if (nullGaps[b, k] >= gap - 1e-12)
                    exceeding++;
            }
            pValues[k] = double.IsNaN(gap) ? double.NaN : MultipleTesting.PermutationPValue(exceeding, permutations);
            upper[k] = Statistics.Quantile(column.Where(double.IsFinite), 0.95);
        }
        var inputs = columns.Select((col, k) => new SplitCheckInput(col.Kind, col.Index, observed[k, 0], observed[k, 1], pValues[k], upper[k], false)).ToImmutableArray();
        return new SplitCheckResult(score, nTraining, n - nTraining, permutations, options.FalseDiscoveryRate, options.MinimumGap, inputs)
            .DecidedAt(options.FalseDiscoveryRate, options.MinimumGap);
    }

    // Rows with a finite label, capped by a seeded subsample (kept in row order).
    private static int[] Usable(ProbeRows rows, int cap, Random random)
    {
        var usable = Enumerable.Range(0, rows.Count).Where(r => float.IsFinite(rows.Labels![r])).ToArray();
        if (usable.Length <= cap)
            return usable;
        random.Shuffle(usable);
        return [.. usable.Take(cap).Order()];
    }

    // Per pooled row its label group: binary and continuous targets as 0/1, K classes as the class index.
    private static (int[]? Groups, int Classes, string Score) Groups(float[] labels)
    {
        switch (LabelKinds.Of(labels))
        {
            case LabelKind.Binary:
                return ([.. labels.Select(l => LabelKinds.IsPositive(l) ? 1 : 0)], 2, "out-of-fold AUC");
            case LabelKind.Classes:
                int k = (int)labels.Max() + 1;
                // Counts grow with levels × folds × classes per input and thread: beyond MaximumClasses the check is not run.
                return k > MaximumClasses ? (null, 0, "") : ([.. labels.Select(l => (int)l)], k, "macro one-vs-rest out-of-fold AUC");
            case LabelKind.Continuous:
                var sorted = labels.Order().ToArray();
                double median = sorted.Length % 2 == 1 ? sorted[sorted.Length / 2] : 0.5 * (sorted[sorted.Length / 2 - 1] + sorted[sorted.Length / 2]);
                var groups = labels.Select(l => l > median ? 1 : 0).ToArray();
                return groups.Distinct().Count() < 2 ? (null, 0, "") : (groups, 2, "out-of-fold AUC against the label above the pooled median");
            default:
                return (null, 0, "");
        }
    }

    // Dense values to bins cut at the pooled quantiles (repeated cut points merge); non-finite values get a level of their own.
    private static (int[] Codes, int Levels) Bin(float[] values, int bins)
    {
        var finite = values.Where(float.IsFinite).Order().ToArray();
        var cuts = new List<float>();
        for (int b = 1; b < bins && finite.Length > 0; b++)
        {
            float cut = finite[Math.Min(finite.Length - 1, (int)((long)b * finite.Length / bins))];
            if (cuts.Count == 0 || cut > cuts[^1])
                cuts.Add(cut);
        }
        var cutArray = cuts.ToArray();
        int nonFinite = cutArray.Length + 1;
        var codes = new int[values.Length];
        for (int i = 0; i < values.Length; i++)
        {
            if (!float.IsFinite(values[i]))
            {
                codes[i] = nonFinite;
                continue;
            }
            int at = Array.BinarySearch(cutArray, values[i]);
            codes[i] = at >= 0 ? at + 1 : ~at; // a value equal to a cut goes above it
        }
        return (codes, nonFinite + 1);
    }

    // Categorical ids to levels: the most frequent values with at least two pooled rows, the rest one shared level.
    private static (int[] Codes, int Levels) Levels(long[] values, int maximum)
    {
        var kept = values.GroupBy(v => v).Where(g => g.Count() >= 2).OrderByDescending(g => g.Count()).ThenBy(g => g.Key)
            .Take(maximum - 1).Select((g, i) => (g.Key, i)).ToDictionary(x => x.Key, x => x.i);
        int other = kept.Count;
        return ([.. values.Select(v => kept.TryGetValue(v, out int i) ? i : other)], other + 1);
    }

    private static int[] Cells(int[] codes, int[] folds, int k)
    {
        var cells = new int[codes.Length];
        for (int i = 0; i < codes.Length; i++)
            cells[i] = codes[i] * k + folds[i];
        return cells;
    }

    // Scores one coded input on both sides for a given side assignment; owns its count buffers (one per thread).
    private sealed class Scorer
    {
        private readonly int _levels, _folds, _classes;
        private readonly double _smoothing;
        private readonly int[] _pooled, _small, _other, _levelSmall, _levelOther;
        private readonly double[] _positive = new double[Buckets], _negative = new double[Buckets];
        private int[]? _pooledFor;

        public Scorer(int levels, int folds, int classes, double smoothing)
        {
            _levels = levels;
            _folds = folds;
            _classes = classes;
            _smoothing = smoothing;
            int cells = levels * folds * classes;
            _pooled = new int[cells];
            _small = new int[cells];
            _other = new int[cells];
            _levelSmall = new int[levels * classes];
            _levelOther = new int[levels * classes];
        }

        // rows: the pooled rows on the smaller side; smallIsTraining says which side that is. Returns (training, held-out) scores.
        public (double Training, double HeldOut) Scores(int[] cells, int[] groups, int[] rows, bool smallIsTraining)
        {
            if (!ReferenceEquals(_pooledFor, cells))
            {
                Array.Clear(_pooled);
                for (int i = 0; i < cells.Length; i++)
                    _pooled[cells[i] * _classes + groups[i]]++;
                _pooledFor = cells;
            }
            Array.Clear(_small);
            foreach (int r in rows)
                _small[cells[r] * _classes + groups[r]]++;
            for (int i = 0; i < _other.Length; i++)
                _other[i] = _pooled[i] - _small[i];
            double small = Score(_small, _levelSmall), other = Score(_other, _levelOther);
            return smallIsTraining ? (small, other) : (other, small);
        }

        private double Score(int[] counts, int[] levelCounts)
        {
            Array.Clear(levelCounts);
            var totals = new long[_classes];
            for (int level = 0; level < _levels; level++)
            {
                for (int fold = 0; fold < _folds; fold++)
                {
                    int cell = (level * _folds + fold) * _classes;
                    for (int g = 0; g < _classes; g++)
                    {
                        levelCounts[level * _classes + g] += counts[cell + g];
                        totals[g] += counts[cell + g];
                    }
                }
            }
            long all = totals.Sum();
            if (_classes == 2)
                return Auc(counts, levelCounts, totals, all, 1);
            double sum = 0;
            int scored = 0;
            for (int c = 0; c < _classes; c++)
            {
                double auc = Auc(counts, levelCounts, totals, all, c);
                if (double.IsFinite(auc))
                {
                    sum += auc;
                    scored++;
                }
            }
            return scored == 0 ? double.NaN : sum / scored;
        }

        // One-vs-rest AUC of class c's out-of-fold encoding, from bucketed encodings.
        private double Auc(int[] counts, int[] levelCounts, long[] totals, long all, int c)
        {
            long positives = totals[c], negatives = all - positives;
            if (positives == 0 || negatives == 0)
                return double.NaN;
            double prior = (double)positives / all;
            Array.Clear(_positive);
            Array.Clear(_negative);
            for (int level = 0; level < _levels; level++)
            {
                int levelBase = level * _classes;
                long levelAll = 0;
                for (int g = 0; g < _classes; g++)
                    levelAll += levelCounts[levelBase + g];
                if (levelAll == 0)
                    continue;
                for (int fold = 0; fold < _folds; fold++)
                {
                    int cell = (level * _folds + fold) * _classes;
                    long cellAll = 0;
                    for (int g = 0; g < _classes; g++)
                        cellAll += counts[cell + g];
                    if (cellAll == 0)
                        continue;
                    long cellPositive = counts[cell + c];
                    double outPositive = levelCounts[levelBase + c] - cellPositive, outAll = levelAll - cellAll;
                    double encoding = (outPositive + _smoothing * prior) / (outAll + _smoothing);
                    if (!double.IsFinite(encoding))
                        encoding = prior;
                    int bucket = Math.Clamp((int)(encoding * Buckets), 0, Buckets - 1);
                    _positive[bucket] += cellPositive;
                    _negative[bucket] += cellAll - cellPositive;
                }
            }
            double below = 0, area = 0;
            for (int b = 0; b < Buckets; b++)
            {
                area += _positive[b] * (below + 0.5 * _negative[b]);
                below += _negative[b];
            }
            return area / ((double)positives * negatives);
        }
    }
}
