using System.Collections.Immutable;
using System.Diagnostics;
using DriftWatch.Detection;
using DriftWatch.Layers;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Attribution;

/// <summary>Which step of an epoch's attribution a problem came from.</summary>
public enum AttributionStep
{
    /// <summary>The check of the model's declared linear entry layer; the whole model was attributed instead.</summary>
    EntryCheck,

    /// <summary>An attribution method; its map is missing.</summary>
    Method,

    /// <summary>A map's quality figures; the map is there without them.</summary>
    QualityFigures,

    /// <summary>The layer maps, or one layer method on one watched layer.</summary>
    LayerMaps,

    /// <summary>The agreement between the epoch's maps; the maps are there without their quality documents.</summary>
    Agreement,
}

/// <summary>A failure in one step of an epoch's attribution that the rest of the epoch survived.</summary>
/// <param name="Step">The step that failed.</param>
/// <param name="Where">What failed, in words (a method's name, "the entry layer check").</param>
/// <param name="Epoch">The epoch.</param>
/// <param name="Error">The failure.</param>
public sealed record AttributionProblem(AttributionStep Step, string Where, int Epoch, Exception Error)
{
    /// <summary>The problem in one line, as an epoch's stored problems and a monitoring-failure finding say it.</summary>
    public string Text => Describe(Where, Epoch, Error);

    /// <summary>The one line that says <paramref name="where"/> failed at <paramref name="epoch"/> with <paramref name="error"/>.</summary>
    public static string Describe(string where, int epoch, Exception error)
    {
        ArgumentNullException.ThrowIfNull(error);
        return $"{where} failed at epoch {epoch}: {error.GetType().Name}: {error.Message}";
    }
}

/// <summary>One method's attribution map of an epoch, in memory and in its stored form.</summary>
/// <param name="Document">The stored form, under the method's own name.</param>
/// <param name="Map">The map.</param>
/// <param name="Figures">Its quality figures, when they were asked for and measured.</param>
internal sealed record EpochMap(MapDocument Document, AttributionMap Map, QualityFigures? Figures)
{
    /// <summary>Its agreement with the epoch's other maps and its quality figures, when either exists; else null.</summary>
    public MapQualityDocument? Quality { get; init; }
}

/// <summary>What attributing one epoch gave: a map per method that succeeded, the layer maps, and the problems met.</summary>
/// <param name="Maps">The maps, in the order of the methods.</param>
/// <param name="LayerMaps">The layer maps, watched layer by layer method.</param>
/// <param name="Problems">The steps that failed, in the order they ran.</param>
internal sealed record EpochMaps(ImmutableArray<EpochMap> Maps, ImmutableArray<LayerMapDocument> LayerMaps, ImmutableArray<AttributionProblem> Problems);

/// <summary>
/// Attributes a snapshot's probe set with the configured methods and returns the epoch's maps, quality figures and
/// layer maps: the one path the monitor, <see cref="Reattribution"/> and its shards take.
/// </summary>
/// <remarks>
/// Steps: encode the probe rows (their shape checked against the schema), resolve the baseline, build the input
/// (<see cref="AttributionInput.ForModel"/>; a declared entry layer that fails its check becomes a problem and the
/// whole model is attributed), run each method and split its map into the halves, measure quality figures, attribute
/// the watched layers, and compare the maps with each other. Unless <see cref="Strict"/> is on, a failing step becomes
/// an <see cref="AttributionProblem"/>; a probe that does not fit the schema always throws.
/// </remarks>
internal sealed class EpochAttribution
{
    /// <summary>The probe set whose rows are attributed.</summary>
    public required ProbeSet Probe { get; init; }

    /// <summary>The feature schema the model's encode step follows.</summary>
    public required FeatureSchema Schema { get; init; }

    /// <summary>The attribution methods, in order.</summary>
    public required ImmutableArray<IAttributionMethod> Methods { get; init; }

    /// <summary>The output attributed. Default <see cref="AttributionTarget.Logit"/>.</summary>
    public AttributionTarget Target { get; init; } = AttributionTarget.Logit;

    /// <summary>The baseline x′. Default <see cref="Baseline.Zero"/>.</summary>
    public Baseline Baseline { get; init; } = Baseline.Zero;

    /// <summary>At most this many expanded rows go through the model at once. Default <see cref="AttributionInput.DefaultChunkRows"/> (2048).</summary>
    public int ChunkRows { get; init; } = AttributionInput.DefaultChunkRows;

    /// <summary>Memory one block may take, in bytes. Default <see cref="MemoryBudget.DefaultBytes"/> (256 MiB).</summary>
    public long MemoryBudgetBytes { get; init; } = MemoryBudget.DefaultBytes;

    /// <summary>Measure each map's quality figures with these options. Default: null, off.</summary>
    public QualityOptions? Quality { get; init; }

    /// <summary>The module paths of the layers attributed with <see cref="LayerMethods"/>. Default: none.</summary>
    public ImmutableArray<string> WatchedLayers { get; init; } = [];

    /// <summary>The layer methods run on each watched layer. Default: none.</summary>
    public ImmutableArray<IAttributionMethod> LayerMethods { get; init; } = [];

    /// <summary>A failing step throws instead of becoming a problem. Default: off.</summary>
    public bool Strict { get; init; }

    /// <summary>Attributes <paramref name="model"/>'s probe rows for epoch <paramref name="epoch"/> of run <paramref name="runId"/>.</summary>
    /// <remarks>The module is put in eval mode with frozen weights while it works, and left as it was found.</remarks>
    /// <exception cref="DriftWatchException">The encoded probe does not fit the schema, or a given baseline does not fit it.</exception>
    public EpochMaps Attribute(IWatchedModel model, int runId, int epoch)
    {
        ArgumentNullException.ThrowIfNull(model);
        var problems = new List<AttributionProblem>();
        var module = model.Module;
        bool wasTraining = module.training;
        var parameters = module.parameters().ToList();
        var requiresGrad = parameters.Select(p => p.requires_grad).ToList();
        try
        {
            // Eval mode (no dropout, fixed batch-norm statistics) and frozen weights: the backward pass then
            // computes input gradients only.
            module.eval();
            foreach (var p in parameters)
                p.requires_grad = false;

            using var scope = torch.NewDisposeScope();
            var input = Input(model, epoch, problems);
            var maps = new List<EpochMap>();
            foreach (var method in Methods)
            {
                if (Map(method, input, runId, epoch, problems) is { } map)
                    maps.Add(map);
            }
            var layerMaps = WatchedLayers.IsDefaultOrEmpty ? [] : AttributeLayers(model, input.Whole, runId, epoch, problems);
            return new EpochMaps(Compare(maps, problems, epoch), layerMaps, [.. problems]);
        }
        finally
        {
            for (int i = 0; i < parameters.Count; i++)
                parameters[i].requires_grad = requiresGrad[i];
            module.train(wasTraining);
        }
    }

    /// <summary>The stored quality document of <paramref name="map"/>: its figures (when measured) and <paramref name="agreement"/>.</summary>
    public MapQualityDocument QualityDocument(MapDocument map, QualityFigures? figures, List<AgreementDocument> agreement)
    {
        ArgumentNullException.ThrowIfNull(map);
        ArgumentNullException.ThrowIfNull(agreement);
        return new MapQualityDocument
        {
            RunId = map.RunId,
            Epoch = map.Epoch,
            Method = map.Method,
            Target = map.Target,
            Agreement = agreement,
            Measured = figures is not null,
            Infidelity = figures?.Infidelity ?? double.NaN,
            RelativeInfidelity = figures?.RelativeInfidelity ?? double.NaN,
            MaxSensitivity = figures?.MaxSensitivity ?? double.NaN,
            RelativeMaxSensitivity = figures?.RelativeMaxSensitivity ?? double.NaN,
            QualityRows = figures?.Rows ?? 0,
            QualitySettings = figures is null ? [] : new Dictionary<string, string>(Quality!.ToSettings(), StringComparer.Ordinal),
            QualityEvaluations = figures?.Evaluations ?? 0,
        };
    }

    // The input every method reads: one for the whole probe, or, for the row's true class, one per class present (the rows
    // of that class, attributed with that class's output). Attribution methods treat rows independently, so attributing each
    // class's rows with its own output is attributing every row towards its own label, at the cost of one pass over the rows.
    private sealed record PreparedInput(AttributionInput? Whole, ImmutableArray<ClassPart> Parts, int Rows, int Columns);

    private sealed record ClassPart(int Class, int[] Rows, AttributionInput Input);

    private PreparedInput Input(IWatchedModel model, int epoch, List<AttributionProblem> problems)
    {
        if (!Target.IsPerRow)
        {
            var whole = WholeInput(model, Target, epoch, problems, null);
            return new PreparedInput(whole, [], whole.Rows, whole.Columns);
        }
        var labels = Probe.Rows.Labels;
        var kind = LabelKinds.Of(labels);
        if (kind is not (LabelKind.Binary or LabelKind.Classes))
            throw new DriftWatchException($"the true-class target needs class labels (0 … K−1, or binary) on every probe row; the probe's labels are {(kind == LabelKind.None ? "missing" : "continuous")}: pass labels or choose another target");
        var classes = labels!.Select(LabelKinds.ClassOf).ToArray();
        var parts = ImmutableArray.CreateBuilder<ClassPart>();
        AttributionInput? any = null;
        foreach (int k in classes.Distinct().Order())
        {
            int[] rows = [.. Enumerable.Range(0, classes.Length).Where(r => classes[r] == k)];
            var part = WholeInput(model, AttributionTarget.Class(k), epoch, problems, rows);
            any ??= part;
            parts.Add(new ClassPart(k, rows, part));
        }
        return new PreparedInput(null, parts.ToImmutable(), classes.Length, any!.Columns);
    }

    // The probe rows (all, or only <paramref name="subset"/>) in feature space, the baseline, and the input for one output.
    private AttributionInput WholeInput(IWatchedModel model, AttributionTarget target, int epoch, List<AttributionProblem> problems, int[]? subset)
    {
        var probe = Probe;
        Tensor features;
        using (torch.no_grad())
        {
            var dense = torch.tensor(probe.Rows.Dense, [probe.Count, probe.Rows.DenseCount]);
            var categorical = torch.tensor(probe.Rows.Categorical, [probe.Count, probe.Rows.CategoricalCount]);
            features = model.Encode(dense, categorical).detach().to(ScalarType.Float32);
        }
        if (features.dim() != 2 || features.shape[0] != probe.Count || features.shape[1] != Schema.ColumnCount)
            throw new DriftWatchException($"encode returned shape [{string.Join(", ", features.shape)}]; expected [{probe.Count}, {Schema.ColumnCount}] as the schema says");
        var baseline = Baseline.Resolve(features[TensorIndex.Slice(probe.HeldOutCount, probe.Count)], Schema.ColumnCount);
        if (subset is not null)
        {
            var index = torch.tensor(subset.Select(r => (long)r).ToArray());
            features = features.index_select(0, index);
            if (baseline.dim() == 2)
                baseline = baseline.index_select(0, index);
            CheckOutputs(model, features, target.OutputIndex);
        }
        try
        {
            return AttributionInput.ForModel(model, target, features, baseline, ChunkRows, Schema, memoryBudgetBytes: MemoryBudgetBytes);
        }
        catch (Exception e) when (!Strict)
        {
            // A declared entry layer that does not reproduce the score step, or a score step that fails on the rows it
            // was checked on: say so, and attribute the whole model (the methods report a failing score step too).
            problems.Add(new AttributionProblem(AttributionStep.EntryCheck, "the entry layer check", epoch, e));
            return AttributionInput.ForModel(model, target, features, baseline, ChunkRows, Schema, splitAtEntry: false, MemoryBudgetBytes);
        }
    }

    // The true-class target reads output column k for class k's rows: the model must score at least k + 1 outputs.
    private static void CheckOutputs(IWatchedModel model, Tensor features, int outputClass)
    {
        using var noGrad = torch.no_grad();
        using var output = model.Score(features[TensorIndex.Slice(0, 1)]);
        long width = output.dim() == 2 ? output.shape[1] : 1;
        if (output.dim() != 2 || outputClass >= width)
            throw new DriftWatchException($"the true-class target needs one output per class: the probe's labels include class {outputClass} but the model scores {width} output(s) per row; give the model one output per class or choose another target");
    }

    // One method over a prepared input: the whole probe at once, or class by class with the rows put back in place.
    private static ColumnAttribution Attribute(IAttributionMethod method, PreparedInput input)
    {
        if (input.Whole is { } whole)
            return method.Attribute(whole);
        var scores = new float[input.Rows * input.Columns];
        float[]? gaps = null;
        long evaluations = 0;
        foreach (var part in input.Parts)
        {
            var columns = method.Attribute(part.Input);
            evaluations += columns.Evaluations;
            if (columns.OutputGaps is not null)
                gaps ??= new float[input.Rows];
            for (int i = 0; i < part.Rows.Length; i++)
            {
                Array.Copy(columns.Scores, i * input.Columns, scores, part.Rows[i] * input.Columns, input.Columns);
                if (gaps is not null && columns.OutputGaps is not null)
                    gaps[part.Rows[i]] = columns.OutputGaps[i];
            }
        }
        return new ColumnAttribution(input.Rows, input.Columns, scores, gaps, evaluations);
    }

    // Quality figures of a prepared input: the whole probe's, or each class's rows measured with its own output and the
    // figures averaged with the rows each measured as weights (evaluations and rows add up).
    private QualityFigures MeasureQuality(IAttributionMethod method, PreparedInput input, ColumnAttribution columns)
    {
        if (input.Whole is { } whole)
            return MapQuality.Measure(method, whole, columns, Quality!);
        var figures = new List<QualityFigures>();
        foreach (var part in input.Parts)
        {
            var scores = new float[part.Rows.Length * input.Columns];
            float[]? gaps = columns.OutputGaps is null ? null : new float[part.Rows.Length];
            for (int i = 0; i < part.Rows.Length; i++)
            {
                Array.Copy(columns.Scores, part.Rows[i] * input.Columns, scores, i * input.Columns, input.Columns);
                if (gaps is not null)
                    gaps[i] = columns.OutputGaps![part.Rows[i]];
            }
            figures.Add(MapQuality.Measure(method, part.Input, new ColumnAttribution(part.Rows.Length, input.Columns, scores, gaps, 0), Quality!));
        }
        int rows = figures.Sum(f => f.Rows);
        double Mean(Func<QualityFigures, double> figure) => figures.Sum(f => figure(f) * f.Rows) / Math.Max(1, rows);
        return new QualityFigures(Mean(f => f.Infidelity), Mean(f => f.RelativeInfidelity), Mean(f => f.MaxSensitivity), Mean(f => f.RelativeMaxSensitivity), rows, figures.Sum(f => f.Evaluations));
    }

    // One method's map and its stored form under the method's name, then its quality figures when asked for.
    private EpochMap? Map(IAttributionMethod method, PreparedInput input, int runId, int epoch, List<AttributionProblem> problems)
    {
        EpochMap map;
        ColumnAttribution columns;
        try
        {
            var watch = Stopwatch.StartNew();
            columns = Attribute(method, input);
            var attributed = AttributionMap.FromColumns(columns, Schema);
            double seconds = watch.Elapsed.TotalSeconds;
            map = new EpochMap(Document(method, attributed, columns, runId, epoch, seconds), attributed, null);
        }
        catch (Exception e) when (!Strict)
        {
            problems.Add(new AttributionProblem(AttributionStep.Method, method.Name, epoch, e));
            return null;
        }
        if (Quality is null)
            return map;
        try
        {
            return map with { Figures = MeasureQuality(method, input, columns) };
        }
        catch (Exception e) when (!Strict)
        {
            problems.Add(new AttributionProblem(AttributionStep.QualityFigures, method.Name + " quality figures", epoch, e));
            return map;
        }
    }

    private MapDocument Document(IAttributionMethod method, AttributionMap map, ColumnAttribution columns, int runId, int epoch, double seconds)
    {
        var (heldOut, training) = HalfImportance.ForHalves(map, Probe, Target);
        return new MapDocument
        {
            RunId = runId,
            Epoch = epoch,
            Method = method.Name,
            Target = Target.Label,
            Rows = map.Rows,
            Features = map.Features,
            Scores = FloatBytes.FromFloats(map.Scores),
            Deltas = map.Deltas is null ? null : FloatBytes.FromFloats(map.Deltas),
            OutputGaps = map.OutputGaps is null ? null : FloatBytes.FromFloats(map.OutputGaps),
            HeldOut = ImportanceDocuments.From(heldOut),
            Training = ImportanceDocuments.From(training),
            Seconds = seconds,
            Evaluations = columns.Evaluations,
            Settings = new Dictionary<string, string>(method.Settings, StringComparer.Ordinal),
        };
    }

    // Each watched layer with each layer method; the hooks these register are gone when each call returns.
    private ImmutableArray<LayerMapDocument> AttributeLayers(IWatchedModel model, AttributionInput? input, int runId, int epoch, List<AttributionProblem> problems)
    {
        float[] outputs;
        try
        {
            if (input is null)
                throw new DriftWatchException("layer maps attribute one output for every row; the true-class target reads a different output per row: watch layers with target 'class N'");
            outputs = LayerMaps.Outputs(input);
        }
        catch (Exception e) when (!Strict)
        {
            problems.Add(new AttributionProblem(AttributionStep.LayerMaps, "layer maps", epoch, e));
            return [];
        }
        var layerMaps = ImmutableArray.CreateBuilder<LayerMapDocument>();
        foreach (string path in WatchedLayers)
        {
            foreach (var method in LayerMethods)
            {
                try
                {
                    var layer = WatchedLayer.Find(model.Module, path);
                    layerMaps.Add(LayerMaps.Attribute(method, input! with { Layer = layer }, outputs, runId, epoch, Target.Label));
                }
                catch (Exception e) when (!Strict)
                {
                    problems.Add(new AttributionProblem(AttributionStep.LayerMaps, $"{method.Name} of layer '{path}'", epoch, e));
                }
            }
        }
        return layerMaps.ToImmutable();
    }

    // Per map: its agreement with the epoch's other maps and its quality figures, when either exists.
    private ImmutableArray<EpochMap> Compare(List<EpochMap> maps, List<AttributionProblem> problems, int epoch)
    {
        if (maps.Count < 2 && maps.All(m => m.Figures is null))
            return [.. maps];
        var compared = new List<EpochMap>(maps);
        try
        {
            for (int i = 0; i < maps.Count; i++)
            {
                var map = maps[i];
                var agreement = maps.Where(o => o.Document.Method != map.Document.Method)
                    .Select(o => new AgreementDocument { Method = o.Document.Method, Spearman = MethodAgreement.Spearman(map.Map, o.Map, Probe.HeldOutCount) })
                    .ToList();
                compared[i] = map with { Quality = QualityDocument(map.Document, map.Figures, agreement) };
            }
        }
        catch (Exception e) when (!Strict)
        {
            problems.Add(new AttributionProblem(AttributionStep.Agreement, "method agreement", epoch, e));
        }
        return [.. compared];
    }
}
