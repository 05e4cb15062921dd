using System.Collections.Immutable;
using System.Globalization;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;

namespace DriftWatch.Detection;

/// <summary>What the detector knows of a run that does not change between epochs: schema, probe rows and training value counts.</summary>
public sealed class RunContext
{
    /// <summary>Creates the context.</summary>
    /// <param name="schema">The feature schema; categorical inputs of a raw row are in the schema's order.</param>
    /// <param name="heldOutCount">Probe rows in the held-out half (they come first).</param>
    /// <param name="trainingCount">Probe rows in the training half.</param>
    /// <param name="labels">Labels of every probe row, or null.</param>
    /// <param name="categorical">Row-major categorical ids of every probe row.</param>
    /// <param name="trainingValueCounts">Per categorical feature name, training rows per value.</param>
    /// <param name="splitCheck">The split-consistency check of the rows the probe was selected from, or null when there is none.</param>
    /// <param name="target">The attributed output (null: the logit); label alignment reads its direction from it and the labels (<see cref="LabelKinds.AlignmentSigns(IReadOnlyList{float}?, AttributionTarget?)"/>).</param>
    public RunContext(
        FeatureSchema schema,
        int heldOutCount,
        int trainingCount,
        float[]? labels,
        long[] categorical,
        IReadOnlyDictionary<string, IReadOnlyDictionary<long, int>> trainingValueCounts,
        SplitCheckResult? splitCheck = null,
        AttributionTarget? target = null)
    {
        ArgumentNullException.ThrowIfNull(schema);
        ArgumentNullException.ThrowIfNull(categorical);
        ArgumentNullException.ThrowIfNull(trainingValueCounts);
        Schema = schema;
        HeldOutCount = heldOutCount;
        TrainingCount = trainingCount;
        Labels = labels;
        LabelKind = LabelKinds.Of(labels);
        Target = target ?? AttributionTarget.Logit;
        var signs = LabelKinds.AlignmentSigns(labels, Target);
        AlignmentSigns = signs is null ? null : [.. signs];
        string? why = LabelKinds.WhyNoAlignment(labels, Target);
        NotChecked = why is null ? null : "not checked: the label rules (leak by alignment, memorised identifier, probable leak) — label alignment needs " + why;
        Categorical = [.. categorical];
        TrainingValueCounts = trainingValueCounts;
        int index = 0;
        CategoricalInput = schema.Features.Select(f => f.Kind == FeatureKind.Categorical ? index++ : -1).ToImmutableArray();
        SplitCheck = splitCheck;
    }

    /// <summary>The split-consistency check of the rows the probe was selected from; null for runs without one (older stores, probes built from their halves).</summary>
    public SplitCheckResult? SplitCheck { get; }

    /// <summary>
    /// The split-consistency result of feature <paramref name="feature"/>'s raw input (the n-th dense or categorical feature
    /// of the schema is the n-th raw input of its kind), or null when the run has no check or no result for it.
    /// </summary>
    public SplitCheckInput? SplitCheckOf(int feature)
    {
        if (SplitCheck is null)
            return null;
        var definition = Schema.Features[feature];
        int position = Schema.Features.Take(feature).Count(f => f.Kind == definition.Kind);
        return SplitCheck.Find(definition.Kind == FeatureKind.Dense ? RawInputKind.Dense : RawInputKind.Categorical, position);
    }

    /// <summary>The feature schema.</summary>
    public FeatureSchema Schema { get; }

    /// <summary>Rows in the held-out half.</summary>
    public int HeldOutCount { get; }

    /// <summary>Rows in the training half.</summary>
    public int TrainingCount { get; }

    /// <summary>Labels of every probe row, or null.</summary>
    public float[]? Labels { get; }

    /// <summary>Row-major categorical ids of every probe row.</summary>
    public ImmutableArray<long> Categorical { get; }

    /// <summary>Training rows per value, per categorical feature name.</summary>
    public IReadOnlyDictionary<string, IReadOnlyDictionary<long, int>> TrainingValueCounts { get; }

    /// <summary>Per feature, its index among the raw categorical inputs, or −1 for dense features.</summary>
    public ImmutableArray<int> CategoricalInput { get; }

    /// <summary>What kind of target the labels are.</summary>
    public LabelKind LabelKind { get; }

    /// <summary>Per probe row, the direction its label points a score for label alignment; null when alignment cannot be computed for these labels.</summary>
    public ImmutableArray<double>? AlignmentSigns { get; }

    /// <summary>The attributed output.</summary>
    public AttributionTarget Target { get; }

    /// <summary>
    /// The one line saying which rules cannot run for this run's labels and target and why (<c>not checked: …</c>), or null when
    /// they all can. The detector puts it in the reasons of the first verdict its attribution rules read; <c>show</c>,
    /// <c>check</c> and the report print it once.
    /// </summary>
    public string? NotChecked { get; }

    /// <summary>Whether the labels are binary (0/1 or ±1).</summary>
    public bool HasBinaryLabels => LabelKind == LabelKind.Binary;

    /// <summary>The categorical id of probe row <paramref name="row"/> for feature <paramref name="feature"/>.</summary>
    public long IdOf(int row, int feature) => Categorical[row * Schema.CategoricalCount + CategoricalInput[feature]];

    /// <summary>
    /// Whether a categorical feature looks like an identifier: at least <paramref name="rareFraction"/> of its training rows carry
    /// a value that appears in 1–3 training rows.
    /// </summary>
    public bool IsIdentifierLike(int feature, double rareFraction)
    {
        var definition = Schema.Features[feature];
        if (definition.Kind != FeatureKind.Categorical || !TrainingValueCounts.TryGetValue(definition.Name, out var counts) || counts.Count == 0)
            return false;
        long total = counts.Values.Sum(c => (long)c);
        long rare = counts.Values.Where(c => c is >= 1 and <= 3).Sum(c => (long)c);
        return total > 0 && (double)rare / total >= rareFraction;
    }

    /// <summary>Builds the context from a stored run.</summary>
    internal static RunContext FromRun(RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(run);
        var schema = FeatureSchema.FromDefinitions(run.Features.Select(f =>
            new FeatureDefinition(f.Name, Enum.Parse<FeatureKind>(f.Kind), f.FirstColumn, f.ColumnCount)));
        var counts = run.TrainingValueCounts.ToDictionary(
            kv => kv.Key,
            kv => (IReadOnlyDictionary<long, int>)kv.Value.ToDictionary(v => long.Parse(v.Key, CultureInfo.InvariantCulture), v => v.Value));
        return new RunContext(
            schema,
            run.HeldOutRows,
            run.TrainingRows,
            run.ProbeLabels is null ? null : FloatBytes.ToFloats(run.ProbeLabels),
            FloatBytes.ToLongs(run.ProbeCategorical),
            counts,
            SplitCheckDocuments.ToResult(run.SplitCheck),
            string.IsNullOrEmpty(run.Target) ? null : AttributionTarget.Parse(run.Target));
    }
}
