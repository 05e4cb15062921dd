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

    public float[] Labels => Enumerable.Range(0, Rows).Select(r => (float)(r % 2)).ToArray();

    // Ids: crate ids unique per row; trays cycle through 4 values.
    public long[] Categorical => Enumerable.Range(0, Rows).SelectMany(r => new long[] { CrateOf(r), r % 4 }).ToArray();

    private long CrateOf(int row) => _sharedCrates && row < _perHalf - 1 ? _perHalf + row + 1 : row;

    public RunContext Context()
    {
        var crates = Enumerable.Range(0, 700).ToDictionary(v => (long)v, _ => 1);
        var trays = Enumerable.Range(0, 4).ToDictionary(v => (long)v, _ => 200);
        var counts = _counts ?? new Dictionary<string, IReadOnlyDictionary<long, int>> { ["crate id"] = crates, ["tray"] = trays };
        return new RunContext(Schema, _perHalf, _perHalf, Labels, Categorical, counts, _splitCheck);
    }

    public EpochInput Epoch(int epoch, double validationLoss = 0.5)
    {
        var random = new Random(_seed * 7919 + epoch);
        var labels = Labels;
        int features = Schema.Count;
        var scores = new float[Rows * features];
        for (int r = 0; r < Rows; r++)
        {
            bool training = r >= _perHalf;
            double label = 2 * labels[r] - 1;
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

    public List<Assessment> Run(int epochs, GatePolicy? policy = null, Func<int, double>? validation = null)
    {
        var detector = new DivergenceDetector(Context(), policy ?? GatePolicy.Default);
        return Enumerable.Range(0, epochs).Select(e => detector.Observe(Epoch(e, validation?.Invoke(e) ?? 0.5))).ToList();
    }

    private static double Gaussian(Random random) =>
        Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble());
}
