using System.Collections.Immutable;
using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Model;
using DriftWatch.Probing;

namespace DriftWatch.Tests.Detection;

/// <summary>
/// Builds a synthetic attribution history without training: 5 features (two dense, an identifier-like 'crate id',
/// a 4-level 'tray', one more dense), per-row scores drawn around a common size, with faults planted from an epoch on.
/// </summary>
internal sealed class HistoryBuilder
{
    /// <summary>How the probe rows are labelled and which output is attributed.</summary>
    public enum LabelMode
    {
        /// <summary>0/1 labels, the logit attributed.</summary>
        ZeroOne,

        /// <summary>−1/+1 labels, the logit attributed.</summary>
        PlusMinus,

        /// <summary>Classes 0, 1, 2 (row r has class r mod 3), each row attributed towards its own true class.</summary>
        ThreeClasses,

        /// <summary>Classes 0, 1, 2, class 1's output attributed (one-vs-rest).</summary>
        ClassOne,

        /// <summary>Classes 0, 1, 2 with the logit attributed: the label rules cannot run and say so.</summary>
        ClassesWithLogit,

        /// <summary>A continuous target, above the median on odd rows and below it on even rows, a regression output attributed.</summary>
        Regression,
    }

    private LabelMode _labels = LabelMode.ZeroOne;
    public const int Crate = 2;
    public const int Tray = 3;
    private int _perHalf = 128;
    private int _seed = 1;
    private int _leakFrom = int.MaxValue;
    private double _leakFactor = 4;
    private int _leakFeature = 0;
    private int _memoriseFrom = int.MaxValue;
    private double _memoriseAgreement = 1;
    private int _dominantFrom = int.MaxValue;
    private int _dominantFeature = Tray;
    private bool _pureValue;
    private bool _pureHeldOut = true;
    private bool _sharedCrates;
    private bool _echo;
    private double _trainingNudge = 1;
    private SplitCheckResult? _splitCheck;
    private IReadOnlyDictionary<string, IReadOnlyDictionary<long, int>>? _counts;

    /// <summary>The run carries this split-consistency check (as a run whose probe came from ProbeSet.Select).</summary>
    public HistoryBuilder WithSplitCheck(SplitCheckResult check)
    {
        _splitCheck = check;
        return this;
    }

    /// <summary>Training value counts in place of the built-in ones (700 single-row crates, 4 trays of 200).</summary>
    public HistoryBuilder WithValueCounts(IReadOnlyDictionary<string, IReadOnlyDictionary<long, int>> counts)
    {
        _counts = counts;
        return this;
    }

    public HistoryBuilder WithLabels(LabelMode labels)
    {
        _labels = labels;
        return this;
    }

    public HistoryBuilder WithSeed(int seed)
    {
        _seed = seed;
        return this;
    }

    public HistoryBuilder WithLeak(int feature, int fromEpoch, double factor = 4)
    {
        _leakFeature = feature;
        _leakFrom = fromEpoch;
        _leakFactor = factor;
        return this;
    }

    /// <summary>From the epoch on, crate ids point at the label on training rows with this probability (1 = fully memorised).</summary>
    public HistoryBuilder WithMemorisedCrate(int fromEpoch, double agreement = 1)
    {
        _memoriseFrom = fromEpoch;
        _memoriseAgreement = agreement;
        return this;
    }

    /// <summary>
    /// From the epoch on, the feature's scores are six times the others'; with <paramref name="pureValue"/> they point at
    /// the true label on 95% of rows (on training rows only when <paramref name="pureHeldOut"/> is false).
    /// </summary>
    public HistoryBuilder WithDominant(int feature, int fromEpoch, bool pureValue, bool pureHeldOut = true)
    {
        _dominantFeature = feature;
        _dominantFrom = fromEpoch;
        _pureValue = pureValue;
        _pureHeldOut = pureHeldOut;
        return this;
    }

    /// <summary>
    /// Held-out row r carries the crate id of training row r + 1 (whose label differs); with <paramref name="echo"/> a
    /// memorised crate's held-out score points at that training row's label instead of at random.
    /// </summary>
    public HistoryBuilder WithSharedCrates(bool echo)
    {
        _sharedCrates = true;
        _echo = echo;
        return this;
    }

    /// <summary>Scales every training-half score of feature 0 by a factor too small to matter.</summary>
    public HistoryBuilder WithTrainingNudge(double factor)
    {
        _trainingNudge = factor;
        return this;
    }

    public int Rows => 2 * _perHalf;

    public FeatureSchema Schema { get; } = FeatureSchema.CreateBuilder()
        .AddDense("air temperature").AddDense("humidity").AddCategorical("crate id", 4).AddCategorical("tray", 4).AddDense("light hours").Build();

    public float[] Labels => Enumerable.Range(0, Rows).Select(r => _labels switch
    {
        LabelMode.PlusMinus => r % 2 == 0 ? -1f : 1f,
        LabelMode.ThreeClasses or LabelMode.ClassOne or LabelMode.ClassesWithLogit => r % 3,
        LabelMode.Regression => (r % 2 == 0 ? -1f : 1f) * (0.5f + (r * 37 % 100) / 100f),
        _ => r % 2,
    }).ToArray();

    public AttributionTarget Target => _labels switch
    {
        LabelMode.ThreeClasses => AttributionTarget.TrueClass,
        LabelMode.ClassOne => AttributionTarget.Class(1),
        LabelMode.Regression => AttributionTarget.Regression,
        _ => AttributionTarget.Logit,
    };

    // The direction a score that points at row r's label has: the label's sign for binary labels, +1 for the row's own
    // class, one-vs-rest for class 1's output, the side of the median for the continuous target.
    private double Direction(int r) => _labels switch
    {
        LabelMode.ThreeClasses or LabelMode.ClassesWithLogit => 1,
        LabelMode.ClassOne => r % 3 == 1 ? 1 : -1,
        LabelMode.Regression or LabelMode.PlusMinus => r % 2 == 0 ? -1 : 1,
        _ => 2 * (r % 2) - 1,
    };

    // Ids: crate ids unique per row; trays cycle through 4 values.
    public long[] Categorical => Enumerable.Range(0, Rows).SelectMany(r => new long[] { CrateOf(r), r % 4 }).ToArray();

    // Shared crates sit on the training row whose label differs: the next one for two labels, the one after for three classes.
    private int ShareOffset => _labels is LabelMode.ThreeClasses or LabelMode.ClassOne or LabelMode.ClassesWithLogit ? 2 : 1;

    private long CrateOf(int row) => _sharedCrates && row < _perHalf - ShareOffset ? _perHalf + row + ShareOffset : row;

    public RunContext Context()
    {
        var crates = Enumerable.Range(0, 700).ToDictionary(v => (long)v, _ => 1);
        var trays = Enumerable.Range(0, 4).ToDictionary(v => (long)v, _ => 200);
        var counts = _counts ?? new Dictionary<string, IReadOnlyDictionary<long, int>> { ["crate id"] = crates, ["tray"] = trays };
        return new RunContext(Schema, _perHalf, _perHalf, Labels, Categorical, counts, _splitCheck, Target);
    }

    public EpochInput Epoch(int epoch, double validationLoss = 0.5)
    {
        var random = new Random(_seed * 7919 + epoch);
        int features = Schema.Count;
        var scores = new float[Rows * features];
        for (int r = 0; r < Rows; r++)
        {
            bool training = r >= _perHalf;
            double label = Direction(r);
            for (int f = 0; f < features; f++)
            {
                double size = Math.Abs(1 + 0.3 * Gaussian(random));
                // Genuine features agree with the label 75% of the time on both halves.
                double sign = random.NextDouble() < 0.75 ? label : -label;
                if (f == _leakFeature && training && epoch >= _leakFrom)
                    size *= _leakFactor;
                if (f == 0 && training)
                    size *= _trainingNudge;
                if (f == Crate && epoch >= _memoriseFrom)
                    sign = training && random.NextDouble() < _memoriseAgreement ? label
                        : !training && _echo && CrateOf(r) != r ? -label // the training row sharing its crate has the other label
                        : (random.NextDouble() < 0.5 ? 1 : -1);
                if (f == _dominantFeature && epoch >= _dominantFrom)
                {
                    size *= 6;
                    if (_pureValue && (training || _pureHeldOut))
                        sign = random.NextDouble() < 0.95 ? label : -label; // every tray value points at the true label
                }
                scores[r * features + f] = (float)(sign * size);
            }
        }
        var map = new AttributionMap(Rows, features, scores, null, null);
        var metrics = new Dictionary<string, double> { [MetricKeys.TrainLoss] = 0.4, [MetricKeys.ValidationLoss] = validationLoss };
        return new EpochInput(epoch, metrics, map, ImmutableArray<Finding>.Empty);
    }

    public List<Assessment> Run(int epochs, GatePolicy? policy = null, Func<int, double>? validation = null, int firstEpoch = 0)
    {
        var detector = new DivergenceDetector(Context(), policy ?? GatePolicy.Default);
        return Enumerable.Range(firstEpoch, epochs).Select(e => detector.Observe(Epoch(e, validation?.Invoke(e) ?? 0.5))).ToList();
    }

    private static double Gaussian(Random random) =>
        Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble());
}
