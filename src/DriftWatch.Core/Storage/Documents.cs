using LiteDB;

namespace DriftWatch.Storage;

#pragma warning disable CA2227 // LiteDB maps documents through settable collection properties.

/// <summary>A stored document with a unique key; writing the same key again replaces it.</summary>
internal interface IKeyedDocument
{
    /// <summary>Store-assigned id.</summary>
    int Id { get; set; }

    /// <summary>The unique key.</summary>
    string Key { get; }
}

/// <summary>One feature of a stored schema.</summary>
internal sealed record FeatureDocument
{
    /// <summary>Feature name.</summary>
    public string Name { get; set; } = "";

    /// <summary><c>Dense</c> or <c>Categorical</c>.</summary>
    public string Kind { get; set; } = "";

    /// <summary>First feature-space column.</summary>
    public int FirstColumn { get; set; }

    /// <summary>Columns owned.</summary>
    public int ColumnCount { get; set; }
}

/// <summary>One configured attribution method and the settings that shaped its maps.</summary>
internal sealed record MethodDocument
{
    /// <summary>The method's stable name.</summary>
    public string Name { get; set; } = "";

    /// <summary>Its settings, invariant culture.</summary>
    public Dictionary<string, string> Settings { get; set; } = [];
}

/// <summary>A training run: its schema, probe set and attribution settings.</summary>
internal sealed record RunDocument
{
    /// <summary>Store-assigned id.</summary>
    [BsonId(autoId: true)]
    public int Id { get; set; }

    /// <summary>The run's unique name in the store.</summary>
    public string Name { get; set; } = "";

    /// <summary>When the run was first registered (UTC).</summary>
    public DateTime CreatedUtc { get; set; }

    /// <summary>A free-text description of the model, data and settings.</summary>
    public string Description { get; set; } = "";

    /// <summary>The feature schema, in feature-space order.</summary>
    public List<FeatureDocument> Features { get; set; } = [];

    /// <summary>SHA-256 of the probe set.</summary>
    public string ProbeHash { get; set; } = "";

    /// <summary>Rows in the held-out half (stored first).</summary>
    public int HeldOutRows { get; set; }

    /// <summary>Rows in the training half.</summary>
    public int TrainingRows { get; set; }

    /// <summary>Dense inputs per probe row.</summary>
    public int DenseCount { get; set; }

    /// <summary>Categorical inputs per probe row.</summary>
    public int CategoricalCount { get; set; }

    /// <summary>Probe dense values, row-major float32 little-endian.</summary>
    public byte[] ProbeDense { get; set; } = [];

    /// <summary>Probe categorical ids, row-major int64 little-endian.</summary>
    public byte[] ProbeCategorical { get; set; } = [];

    /// <summary>Probe labels, float32 little-endian, or null.</summary>
    public byte[]? ProbeLabels { get; set; }

    /// <summary>The attribution methods and their settings.</summary>
    public List<MethodDocument> Methods { get; set; } = [];

    /// <summary>The attributed target, e.g. <c>logit</c>.</summary>
    public string Target { get; set; } = "";

    /// <summary>The baseline, e.g. <c>zero</c>.</summary>
    public string Baseline { get; set; } = "";

    /// <summary>The gate policy the monitor used, as JSON.</summary>
    public string Policy { get; set; } = "";

    /// <summary>A fingerprint of the model's parameter names and shapes, to refuse resuming with a different model.</summary>
    public string ModelShape { get; set; } = "";

    /// <summary>Per categorical feature: how many training rows each value has (value → count), for identifier-like checks.</summary>
    public Dictionary<string, Dictionary<string, int>> TrainingValueCounts { get; set; } = [];

    /// <summary>The model factory that rebuilds the run's model (<c>Namespace.Type, Assembly</c>), or empty when none was given.</summary>
    public string ModelFactory { get; set; } = "";

    /// <summary>The settings the model factory is given, invariant culture.</summary>
    public Dictionary<string, string> ModelSettings { get; set; } = [];

    /// <summary>A caller-given baseline's values, float32 little-endian, or null for the zero and training-mean baselines.</summary>
    public byte[]? BaselineValues { get; set; }

    /// <summary>The module paths of the watched layers, in the order given; null in runs registered before they were recorded.</summary>
    public List<string>? WatchedLayers { get; set; }

    /// <summary>The layer methods and their settings (empty when no layer is watched); null in runs registered before they were recorded.</summary>
    public List<MethodDocument>? LayerMethods { get; set; }

    /// <summary>The run folder whose TorchScript snapshots are the run's models (a followed Python run), or null.</summary>
    public string? RunFolder { get; set; }

    /// <summary>The split-consistency check of the rows the probe was selected from; null when none was run or in runs registered before it was recorded.</summary>
    public SplitCheckDocument? SplitCheck { get; set; }
}

/// <summary>The split-consistency check of a run's source rows.</summary>
internal sealed record SplitCheckDocument
{
    /// <summary>How the score was computed, in words.</summary>
    public string Score { get; set; } = "";

    /// <summary>Training rows read.</summary>
    public int TrainingRowsUsed { get; set; }

    /// <summary>Held-out rows read.</summary>
    public int HeldOutRowsUsed { get; set; }

    /// <summary>Side exchanges B of the null.</summary>
    public int Permutations { get; set; }

    /// <summary>The q the failures were decided at.</summary>
    public double FalseDiscoveryRate { get; set; }

    /// <summary>The effect-size bound the failures were decided at.</summary>
    public double MinimumGap { get; set; }

    /// <summary>One entry per raw input.</summary>
    public List<SplitCheckInputDocument> Inputs { get; set; } = [];
}

/// <summary>One raw input's split-consistency result.</summary>
internal sealed record SplitCheckInputDocument
{
    /// <summary><c>Dense</c> or <c>Categorical</c>.</summary>
    public string Kind { get; set; } = "";

    /// <summary>Index among the raw inputs of its kind.</summary>
    public int Index { get; set; }

    /// <summary>Out-of-fold AUC on training rows.</summary>
    public double TrainingScore { get; set; }

    /// <summary>Out-of-fold AUC on held-out rows.</summary>
    public double HeldOutScore { get; set; }

    /// <summary>Permutation p-value of the gap.</summary>
    public double PValue { get; set; }

    /// <summary>The null's 95th percentile of the gap.</summary>
    public double NullUpper { get; set; }

    /// <summary>Whether it failed at the stored q and bound.</summary>
    public bool Fails { get; set; }
}

/// <summary>Per-feature aggregates over one half of the probe set.</summary>
internal sealed record ImportanceDocument
{
    /// <summary>Mean |score| per feature.</summary>
    public double[] MeanAbsolute { get; set; } = [];

    /// <summary>Mean signed score per feature.</summary>
    public double[] MeanSigned { get; set; } = [];

    /// <summary>Share of total mean |score| per feature.</summary>
    public double[] Share { get; set; } = [];

    /// <summary>Label alignment per feature, or null without binary labels.</summary>
    public double[]? Alignment { get; set; }
}

/// <summary>One attribution map: rows × features for (run, epoch, method, target).</summary>
internal sealed record MapDocument : IKeyedDocument
{
    /// <summary>Store-assigned id.</summary>
    [BsonId(autoId: true)]
    public int Id { get; set; }

    /// <summary>Unique key <c>run/epoch/method/target</c>; writing the same key again replaces the map.</summary>
    public string Key { get; set; } = "";

    /// <summary>The run's id.</summary>
    public int RunId { get; set; }

    /// <summary>The epoch.</summary>
    public int Epoch { get; set; }

    /// <summary>The method's name.</summary>
    public string Method { get; set; } = "";

    /// <summary>The target label.</summary>
    public string Target { get; set; } = "";

    /// <summary>Probe rows.</summary>
    public int Rows { get; set; }

    /// <summary>Features.</summary>
    public int Features { get; set; }

    /// <summary>Row-major scores, float32 little-endian.</summary>
    public byte[] Scores { get; set; } = [];

    /// <summary>Per-row convergence delta, float32, or null.</summary>
    public byte[]? Deltas { get; set; }

    /// <summary>Per-row F(x) − F(x′), float32, or null.</summary>
    public byte[]? OutputGaps { get; set; }

    /// <summary>Aggregates over the held-out half.</summary>
    public ImportanceDocument HeldOut { get; set; } = new();

    /// <summary>Aggregates over the training half.</summary>
    public ImportanceDocument Training { get; set; } = new();

    /// <summary>Wall-clock seconds the attribution took.</summary>
    public double Seconds { get; set; }

    /// <summary>Model evaluations spent.</summary>
    public long Evaluations { get; set; }

    /// <summary>The settings that shaped this map, invariant culture (empty in stores written before settings were kept per map).</summary>
    public Dictionary<string, string> Settings { get; set; } = [];

    /// <summary>The method's own name when the map is stored under another name (a re-attribution); empty otherwise.</summary>
    public string SourceMethod { get; set; } = "";
}

/// <summary>One finished epoch: its metrics, snapshot and any monitoring problems. Written last, so it marks the epoch complete.</summary>
internal sealed record EpochDocument : IKeyedDocument
{
    /// <summary>Store-assigned id.</summary>
    [BsonId(autoId: true)]
    public int Id { get; set; }

    /// <summary>Unique key <c>run/epoch</c>.</summary>
    public string Key { get; set; } = "";

    /// <summary>The run's id.</summary>
    public int RunId { get; set; }

    /// <summary>The epoch.</summary>
    public int Epoch { get; set; }

    /// <summary>Metrics the training loop reported by stored key (<see cref="MetricKeys.TrainLoss"/>, <see cref="MetricKeys.ValidationLoss"/>, others).</summary>
    public Dictionary<string, double> Metrics { get; set; } = [];

    /// <summary>File-storage id of the weight snapshot, or null when snapshots are off or failed.</summary>
    public string? SnapshotId { get; set; }

    /// <summary>When the epoch was recorded (UTC).</summary>
    public DateTime RecordedUtc { get; set; }

    /// <summary>Problems met while monitoring this epoch (the training went on).</summary>
    public List<string> Problems { get; set; } = [];

    /// <summary>Seconds the monitor spent on this epoch.</summary>
    public double MonitorSeconds { get; set; }

    /// <summary>Of <see cref="MonitorSeconds"/>, the seconds spent writing maps, snapshot, statistics and verdict to the store (0 in stores written before it was recorded).</summary>
    public double StoreSeconds { get; set; }
}

/// <summary>One finding as stored.</summary>
internal sealed record FindingDocument
{
    /// <summary>The finding kind.</summary>
    public string Kind { get; set; } = "";

    /// <summary>The feature it concerns, or empty for run-level findings.</summary>
    public string Feature { get; set; } = "";

    /// <summary>Severity: the verdict this finding alone would ask for.</summary>
    public string Severity { get; set; } = "";

    /// <summary>The statistic's size.</summary>
    public double Size { get; set; }

    /// <summary>The noise floor it was judged against.</summary>
    public double NoiseFloor { get; set; }

    /// <summary>Epochs the finding covers.</summary>
    public int[] Epochs { get; set; } = [];

    /// <summary>Plain-language evidence.</summary>
    public string Evidence { get; set; } = "";

    /// <summary>The methods whose maps alone show it, when the method the verdict reads does not; empty otherwise (and in older stores).</summary>
    public List<string> SeenOnlyBy { get; set; } = [];

    /// <summary>Spearman ρ of held-out importance with the other methods at that epoch (see <c>Finding.Agreement</c>); NaN when none.</summary>
    public double Agreement { get; set; } = double.NaN;
}

/// <summary>The gate's verdict at an epoch, with the findings behind it.</summary>
internal sealed record VerdictDocument : IKeyedDocument
{
    /// <summary>Store-assigned id.</summary>
    [BsonId(autoId: true)]
    public int Id { get; set; }

    /// <summary>Unique key <c>run/epoch</c>.</summary>
    public string Key { get; set; } = "";

    /// <summary>The run's id.</summary>
    public int RunId { get; set; }

    /// <summary>The epoch.</summary>
    public int Epoch { get; set; }

    /// <summary>Continue, Caution or Halt.</summary>
    public string Kind { get; set; } = "";

    /// <summary>Reasons, one line each.</summary>
    public List<string> Reasons { get; set; } = [];

    /// <summary>The findings behind the verdict.</summary>
    public List<FindingDocument> Findings { get; set; } = [];
}
/// <summary>The detector's statistics of one epoch, stored so charts and reports need not recompute noise floors.</summary>
internal sealed record StatisticsDocument : IKeyedDocument
{
    /// <summary>Store-assigned id.</summary>
    [BsonId(autoId: true)]
    public int Id { get; set; }

    /// <summary>Unique key <c>run/epoch</c>.</summary>
    public string Key { get; set; } = "";

    /// <summary>The run's id.</summary>
    public int RunId { get; set; }

    /// <summary>The epoch.</summary>
    public int Epoch { get; set; }

    /// <summary>The statistics.</summary>
    public DriftWatch.Detection.EpochStatistics? Statistics { get; set; }
}

/// <summary>Spearman's rank correlation between this map's held-out importance and another method's at the same epoch.</summary>
internal sealed record AgreementDocument
{
    /// <summary>The other method's stored name.</summary>
    public string Method { get; set; } = "";

    /// <summary>Spearman ρ of mean |score| per feature over the held-out half; NaN when either is constant.</summary>
    public double Spearman { get; set; }
}

/// <summary>Trust in one map: its agreement with the other methods at that epoch and its quality figures.</summary>
internal sealed record MapQualityDocument : IKeyedDocument
{
    /// <summary>Store-assigned id.</summary>
    [BsonId(autoId: true)]
    public int Id { get; set; }

    /// <summary>Unique key <c>run/epoch/method/target</c>, like the map's.</summary>
    public string Key { get; set; } = "";

    /// <summary>The run's id.</summary>
    public int RunId { get; set; }

    /// <summary>The epoch.</summary>
    public int Epoch { get; set; }

    /// <summary>The map's stored method name.</summary>
    public string Method { get; set; } = "";

    /// <summary>The target label.</summary>
    public string Target { get; set; } = "";

    /// <summary>Agreement with every other method that had a map at this epoch when this one was written.</summary>
    public List<AgreementDocument> Agreement { get; set; } = [];

    /// <summary>Whether quality figures were measured.</summary>
    public bool Measured { get; set; }

    /// <summary>Infidelity (Yeh et al. 2019), squared output units.</summary>
    public double Infidelity { get; set; } = double.NaN;

    /// <summary>Infidelity over the mean squared output change.</summary>
    public double RelativeInfidelity { get; set; } = double.NaN;

    /// <summary>Max-sensitivity (Yeh et al. 2019), output units.</summary>
    public double MaxSensitivity { get; set; } = double.NaN;

    /// <summary>Max-sensitivity over the norm of the row's own scores.</summary>
    public double RelativeMaxSensitivity { get; set; } = double.NaN;

    /// <summary>Probe rows the figures were measured on.</summary>
    public int QualityRows { get; set; }

    /// <summary>The settings of the measurement, invariant culture.</summary>
    public Dictionary<string, string> QualitySettings { get; set; } = [];

    /// <summary>Model evaluations the figures cost.</summary>
    public long QualityEvaluations { get; set; }
}
/// <summary>
/// What a shard store holds: one shard of a re-attribution split over several processes or machines, with everything
/// <c>merge</c> needs to check that shards belong together (the run's identity, the method and its settings, the split).
/// </summary>
internal sealed record ShardDocument : IKeyedDocument
{
    /// <summary>Store-assigned id.</summary>
    [BsonId(autoId: true)]
    public int Id { get; set; }

    /// <summary>Always <c>shard</c>: a shard store holds one shard record.</summary>
    public string Key { get; set; } = "shard";

    /// <summary>What the shard computed: <c>reattribute</c>.</summary>
    public string Job { get; set; } = "";

    /// <summary>K, this shard's number from 0.</summary>
    public int Index { get; set; }

    /// <summary>N, how many shards the job was split into.</summary>
    public int Count { get; set; }

    /// <summary>The run's name.</summary>
    public string RunName { get; set; } = "";

    /// <summary>The run's probe hash.</summary>
    public string ProbeHash { get; set; } = "";

    /// <summary>The run's feature schema.</summary>
    public List<FeatureDocument> Features { get; set; } = [];

    /// <summary>The run's model factory.</summary>
    public string ModelFactory { get; set; } = "";

    /// <summary>The run's model settings.</summary>
    public Dictionary<string, string> ModelSettings { get; set; } = [];

    /// <summary>The run's model fingerprint (parameter names and shapes).</summary>
    public string ModelShape { get; set; } = "";

    /// <summary>The run's attribution target.</summary>
    public string Target { get; set; } = "";

    /// <summary>The run's baseline.</summary>
    public string Baseline { get; set; } = "";

    /// <summary>The method's own name.</summary>
    public string Method { get; set; } = "";

    /// <summary>The method's settings.</summary>
    public Dictionary<string, string> Settings { get; set; } = [];

    /// <summary>The name the maps are stored under.</summary>
    public string StoredName { get; set; } = "";

    /// <summary>The quality measurement's settings, empty when quality figures were not asked for.</summary>
    public Dictionary<string, string> QualitySettings { get; set; } = [];

    /// <summary>Every epoch of the whole job, in order (all shards together).</summary>
    public int[] JobEpochs { get; set; } = [];

    /// <summary>This shard's epochs.</summary>
    public int[] Epochs { get; set; } = [];

    /// <summary>Epochs of this shard whose map under <see cref="StoredName"/> was already in the source store, so the shard left them out.</summary>
    public int[] AlreadyInSource { get; set; } = [];

    /// <summary>Epochs of this shard without a weight snapshot, so nothing could be computed.</summary>
    public int[] NoSnapshot { get; set; } = [];

    /// <summary>Whether the shard's work ran to its end (a task that stopped early leaves this false).</summary>
    public bool Finished { get; set; }

    /// <summary>The store the shard read the run from, as the shard saw its path.</summary>
    public string SourceStore { get; set; } = "";
}
#pragma warning restore CA2227

/// <summary>One layer map: probe rows × units of a hidden layer for (run, epoch, layer, method, target).</summary>
internal sealed record LayerMapDocument : IKeyedDocument
{
    /// <summary>Store-assigned id.</summary>
    [BsonId(autoId: true)]
    public int Id { get; set; }

    /// <summary>Unique key <c>run/epoch/layer/method/target</c>; writing the same key again replaces the map.</summary>
    public string Key { get; set; } = "";

    /// <summary>The run's id.</summary>
    public int RunId { get; set; }

    /// <summary>The epoch.</summary>
    public int Epoch { get; set; }

    /// <summary>The layer's module path, e.g. <c>_scorer.1</c>.</summary>
    public string Layer { get; set; } = "";

    /// <summary>The layer method's name, e.g. <c>layer-conductance</c>.</summary>
    public string Method { get; set; } = "";

    /// <summary>The target label.</summary>
    public string Target { get; set; } = "";

    /// <summary>Probe rows (held-out first, as the run's probe set).</summary>
    public int Rows { get; set; }

    /// <summary>Units of the layer (its output flattened per row).</summary>
    public int Units { get; set; }

    /// <summary>Row-major scores, rows × units, float32 little-endian.</summary>
    public byte[] Scores { get; set; } = [];

    /// <summary>Per-row F(x) − F(x′), float32, for methods with completeness; null otherwise.</summary>
    public byte[]? OutputGaps { get; set; }

    /// <summary>Per-row convergence delta |Σ units − (F(x) − F(x′))|, float32, or null.</summary>
    public byte[]? Deltas { get; set; }

    /// <summary>The attributed output F(x) per row, float32, so a reader knows which class the model predicted.</summary>
    public byte[] Outputs { get; set; } = [];

    /// <summary>Wall-clock seconds the attribution took.</summary>
    public double Seconds { get; set; }

    /// <summary>Model evaluations spent.</summary>
    public long Evaluations { get; set; }

    /// <summary>The method's settings, invariant culture.</summary>
    public Dictionary<string, string> Settings { get; set; } = [];
}
