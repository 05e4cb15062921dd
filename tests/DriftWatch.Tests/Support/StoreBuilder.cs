using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Storage;

namespace DriftWatch.Tests.Support;

/// <summary>
/// Writes a run straight into a store, without training: invented, seeded per-row scores, the per-half aggregates
/// computed from them, statistics with noise floors and a verdict per epoch. For charts, reports and exports of runs
/// whose shape (many features, hostile names) no demo produces.
/// </summary>
internal sealed class StoreBuilder
{
    private string _run = "built-run";
    private string[] _features = ["alpha", "beta", "gamma"];
    private int _epochs = 6;
    private int _rowsPerHalf = 24;
    private int _seed = 11;
    private int _flagged = -1;
    private int _haltFrom = int.MaxValue;
    private bool _statistics = true;
    private int[]? _epochNumbers;
    private double[]? _losses;
    private double[]? _validationLosses;
    private bool _lastUncommitted;
    private int _classes = 2;
    private (int From, int To)[] _stories = [];
    private FindingKind _kind = FindingKind.Leak;
    private VerdictKind _severity = VerdictKind.Halt;
    private bool _findingAnyFeature;

    public StoreBuilder WithRun(string name)
    {
        _run = name;
        return this;
    }

    public StoreBuilder WithFeatures(params string[] names)
    {
        _features = names;
        return this;
    }

    public StoreBuilder WithManyFeatures(int count)
    {
        _features = [.. Enumerable.Range(0, count).Select(i => $"feature {i:D3}")];
        return this;
    }

    public StoreBuilder WithEpochs(int epochs)
    {
        _epochs = epochs;
        return this;
    }

    public StoreBuilder WithSeed(int seed)
    {
        _seed = seed;
        return this;
    }

    /// <summary>Feature <paramref name="feature"/> gets a Leak finding with a Halt from epoch <paramref name="fromEpoch"/> on.</summary>
    public StoreBuilder WithLeakFinding(int feature, int fromEpoch)
    {
        _flagged = feature;
        _haltFrom = fromEpoch;
        return this;
    }

    /// <summary>
    /// Feature <paramref name="feature"/> gets a Leak finding (a Halt) at every epoch of each story, each finding covering
    /// from its story's first epoch to its own and saying "since epoch" that first epoch.
    /// </summary>
    public StoreBuilder WithLeakStories(int feature, params (int From, int To)[] stories)
    {
        _flagged = feature;
        _stories = stories;
        return this;
    }

    /// <summary>
    /// A finding of <paramref name="kind"/> (naming feature <paramref name="feature"/>, or none for a run-level kind when
    /// it is −1) at every epoch from <paramref name="fromEpoch"/> on, asking for <paramref name="severity"/>.
    /// </summary>
    public StoreBuilder WithFinding(FindingKind kind, int feature, int fromEpoch, VerdictKind severity = VerdictKind.Halt)
    {
        _kind = kind;
        _flagged = feature;
        _haltFrom = fromEpoch;
        _severity = severity;
        _findingAnyFeature = true;
        return this;
    }

    /// <summary>The run's epochs carry these numbers, in this order, instead of 1 to the epoch count.</summary>
    public StoreBuilder WithEpochNumbers(params int[] epochs)
    {
        _epochNumbers = epochs;
        return this;
    }

    /// <summary>The training and validation loss of the epoch at each position, instead of the invented curves.</summary>
    public StoreBuilder WithLosses(params double[] losses)
    {
        _losses = losses;
        return this;
    }

    /// <summary>The validation loss of the epoch at each position, when it should differ from the training loss of <see cref="WithLosses"/>.</summary>
    public StoreBuilder WithValidationLosses(params double[] losses)
    {
        _validationLosses = losses;
        return this;
    }

    /// <summary>The last epoch's map, statistics and verdict are written but not its epoch document: a writer stopped before its commit marker.</summary>
    public StoreBuilder WithLastEpochUncommitted()
    {
        _lastUncommitted = true;
        return this;
    }

    /// <summary>The probe rows carry class labels 0 … <paramref name="classes"/> − 1 (row r has class r mod K) instead of 0/1.</summary>
    public StoreBuilder WithClassLabels(int classes)
    {
        _classes = classes;
        return this;
    }

    public StoreBuilder WithoutStatistics()
    {
        _statistics = false;
        return this;
    }

    /// <summary>Writes the run into the store at <paramref name="path"/> (created when missing) and returns it.</summary>
    public RunDocument Build(string path)
    {
        using var store = RunStore.OpenForWriting(path);
        int features = _features.Length;
        int rows = 2 * _rowsPerHalf;
        var random = new Random(_seed);
        var labels = new float[rows];
        for (int r = 0; r < rows; r++)
            labels[r] = r % _classes;
        var run = store.AddRun(new RunDocument
        {
            Name = _run,
            CreatedUtc = new DateTime(2026, 1, 2, 3, 4, 0, DateTimeKind.Utc),
            Description = "built by StoreBuilder: invented scores",
            Features = [.. _features.Select((n, i) => new FeatureDocument { Name = n, Kind = "Dense", FirstColumn = i, ColumnCount = 1 })],
            ProbeHash = "0123456789abcdef",
            HeldOutRows = _rowsPerHalf,
            TrainingRows = _rowsPerHalf,
            DenseCount = features,
            ProbeDense = FloatBytes.FromFloats(new float[rows * features]),
            ProbeLabels = FloatBytes.FromFloats(labels),
            Methods = [new MethodDocument { Name = "integrated-gradients", Settings = new() { ["steps"] = "16" } }],
            Target = "logit",
            Baseline = "zero",
            Policy = GatePolicy.Default.ToJson(),
        });
        int[] heldOut = [.. Enumerable.Range(0, _rowsPerHalf)];
        int[] training = [.. Enumerable.Range(_rowsPerHalf, _rowsPerHalf)];
        int[] numbers = _epochNumbers ?? [.. Enumerable.Range(1, _epochs)];
        for (int position = 0; position < numbers.Length; position++)
        {
            int epoch = numbers[position];
            var scores = new float[rows * features];
            for (int r = 0; r < rows; r++)
            {
                for (int f = 0; f < features; f++)
                {
                    // Feature f weighs 1/(f+1); the flagged feature grows on training rows only, epoch after epoch.
                    double scale = 1.0 / (f + 1) * (f == _flagged && r >= _rowsPerHalf ? 1 + 0.5 * epoch : 1);
                    scores[r * features + f] = (float)((random.NextDouble() * 2 - 0.6) * scale);
                }
            }
            var map = new AttributionMap(rows, features, scores, null, null);
            var h = HalfImportance.Compute(map, heldOut, labels);
            var t = HalfImportance.Compute(map, training, labels);
            store.WriteMap(new MapDocument
            {
                RunId = run.Id,
                Epoch = epoch,
                Method = "integrated-gradients",
                Target = "logit",
                Rows = rows,
                Features = features,
                Scores = FloatBytes.FromFloats(scores),
                HeldOut = Document(h),
                Training = Document(t),
            });
            if (_statistics)
            {
                store.WriteStatistics(new StatisticsDocument
                {
                    RunId = run.Id,
                    Epoch = epoch,
                    Statistics = new EpochStatistics
                    {
                        Epoch = epoch,
                        Trusted = true,
                        ShareHeldOut = [.. h.Share],
                        ShareTraining = [.. t.Share],
                        ShareHeldOutWidth = [.. h.Share.Select(s => s * 0.2)],
                        ShareTrainingWidth = [.. t.Share.Select(s => s * 0.25)],
                        ShareGap = [.. t.Share.Zip(h.Share, (a, b) => a - b)],
                        ShareGapWidth = [.. h.Share.Select(s => s * 0.3)],
                        AlignmentHeldOut = [.. h.Alignment ?? []],
                        AlignmentTraining = [.. t.Alignment ?? []],
                        AlignmentGap = [.. (t.Alignment ?? []).Zip(h.Alignment ?? [], (a, b) => a - b)],
                        AlignmentGapWidth = [.. (h.Alignment ?? []).Select(_ => 0.2)],
                        LeadWidthHeldOut = 0.02,
                        LeadWidthTraining = 0.025,
                        Drift = position == 0 ? double.NaN : 0.1 / epoch,
                        RankAgreementWithBest = Math.Max(-1, 1 - 0.05 * epoch),
                        GeneralisationLoss = Math.Max(0, (epoch - 3) * 4.0),
                    },
                });
            }
            var story = _stories.FirstOrDefault(t => epoch >= t.From && epoch <= t.To);
            bool inStory = story != default;
            bool halt = (_flagged >= 0 || _findingAnyFeature) && (epoch >= _haltFrom || inStory);
            int from = inStory ? story.From : _haltFrom;
            var findings = halt
                ? new List<FindingDocument>
                {
                    new()
                    {
                        Kind = _kind.Name,
                        Feature = _flagged >= 0 ? _features[_flagged] : "",
                        Severity = _severity.ToString(),
                        Size = 0.2,
                        NoiseFloor = 0.05,
                        Epochs = [from, epoch],
                        Evidence = _flagged >= 0
                            ? $"'{_features[_flagged]}' takes more attribution on training rows than held-out rows" + (inStory ? $" since epoch {from} (at epoch {epoch})" : "")
                            : $"metric 'train_loss' is NaN at epoch {epoch}",
                    },
                }
                : [];
            store.WriteVerdict(new VerdictDocument
            {
                RunId = run.Id,
                Epoch = epoch,
                Kind = halt ? _severity.ToString() : nameof(VerdictKind.Continue),
                Reasons = [.. findings.Select(f => f.Evidence)],
                Findings = findings,
            });
            if (_lastUncommitted && position == numbers.Length - 1)
                break;
            store.WriteEpoch(new EpochDocument
            {
                RunId = run.Id,
                Epoch = epoch,
                Metrics = _losses is null
                    ? new() { [MetricKeys.TrainLoss] = 1.0 / epoch, [MetricKeys.ValidationLoss] = 0.6 + 0.02 * epoch * epoch / 4, ["accuracy"] = 0.5 + 0.04 * epoch }
                    : new() { [MetricKeys.TrainLoss] = _losses[position], [MetricKeys.ValidationLoss] = (_validationLosses ?? _losses)[position] },
                RecordedUtc = new DateTime(2026, 1, 2, 4, 0, 0, DateTimeKind.Utc).AddMinutes(position + 1),
            });
        }
        return run;
    }

    private static ImportanceDocument Document(HalfImportance half) => ImportanceDocuments.From(half);
}
