using System.Globalization;
using DriftWatch.Attribution;
using DriftWatch.Model;
using DriftWatch.Probing;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Layers;

/// <summary>The settings of a pruning what-if; build once, then <see cref="Validate"/>.</summary>
public sealed record PruningOptions
{
    /// <summary>The fraction of the layer's units masked by each choice (rounded, at least one unit). Default 0.15.</summary>
    public double Fraction { get; init; } = 0.15;

    /// <summary>How many random choices are drawn (seeds <see cref="Seed"/>, <see cref="Seed"/> + 1, …). Default 5.</summary>
    public int Seeds { get; init; } = 5;

    /// <summary>The first seed of the random choices. Default 1.</summary>
    public int Seed { get; init; } = 1;

    /// <summary>A row is predicted positive when the model's probability is at least this. Default 0.5.</summary>
    public double Threshold { get; init; } = 0.5;

    /// <summary>At most this many rows go through the model at once. Default 8192.</summary>
    public int ChunkRows { get; init; } = 8192;

    /// <summary>Checks every setting, naming the first bad one.</summary>
    /// <exception cref="DriftWatchException">A setting out of range.</exception>
    public void Validate()
    {
        if (!(Fraction > 0 && Fraction < 1))
            throw new DriftWatchException($"the fraction of units to mask must be above 0 and below 1; got {Fraction.ToString(CultureInfo.InvariantCulture)}");
        if (Seeds < 1 || Seeds > 1000)
            throw new DriftWatchException($"the number of random choices must be between 1 and 1000; got {Seeds}");
        if (!(Threshold > 0 && Threshold < 1))
            throw new DriftWatchException($"the decision threshold must be a probability above 0 and below 1; got {Threshold.ToString(CultureInfo.InvariantCulture)}");
        if (ChunkRows < 1)
            throw new DriftWatchException($"chunk rows must be at least 1; got {ChunkRows}");
    }

    /// <summary>How many of <paramref name="units"/> units are masked: the fraction, rounded, at least one and at most all but one.</summary>
    public int MaskedOf(int units) => Math.Clamp((int)Math.Round(Fraction * units, MidpointRounding.AwayFromZero), 1, Math.Max(1, units - 1));
}

/// <summary>A binary confusion matrix; the positive class is label 1.</summary>
/// <param name="TruePositives">Label 1, predicted 1.</param>
/// <param name="FalsePositives">Label 0, predicted 1.</param>
/// <param name="TrueNegatives">Label 0, predicted 0.</param>
/// <param name="FalseNegatives">Label 1, predicted 0.</param>
public sealed record ConfusionMatrix(int TruePositives, int FalsePositives, int TrueNegatives, int FalseNegatives)
{
    /// <summary>Rows counted.</summary>
    public int Total => TruePositives + FalsePositives + TrueNegatives + FalseNegatives;

    /// <summary>TP / (TP + FP); 0 when nothing is predicted positive.</summary>
    public double Precision => TruePositives + FalsePositives == 0 ? 0 : (double)TruePositives / (TruePositives + FalsePositives);

    /// <summary>TP / (TP + FN); 0 when no row is positive.</summary>
    public double Recall => TruePositives + FalseNegatives == 0 ? 0 : (double)TruePositives / (TruePositives + FalseNegatives);

    /// <summary>The harmonic mean of precision and recall, 2TP / (2TP + FP + FN); 0 when both are 0.</summary>
    public double F1 => 2 * TruePositives + FalsePositives + FalseNegatives == 0 ? 0 : 2.0 * TruePositives / (2 * TruePositives + FalsePositives + FalseNegatives);

    /// <summary>(TP + TN) / total.</summary>
    public double Accuracy => Total == 0 ? 0 : (double)(TruePositives + TrueNegatives) / Total;

    /// <summary>Counts predictions (probability at least <paramref name="threshold"/> is positive) against labels (1 positive, 0 negative).</summary>
    /// <exception cref="DriftWatchException">Lengths differ, or a label is neither 0 nor 1.</exception>
    public static ConfusionMatrix Count(IReadOnlyList<float> probabilities, IReadOnlyList<float> labels, double threshold)
    {
        ArgumentNullException.ThrowIfNull(probabilities);
        ArgumentNullException.ThrowIfNull(labels);
        if (probabilities.Count != labels.Count)
            throw new DriftWatchException($"{probabilities.Count} predictions for {labels.Count} labels");
        int tp = 0, fp = 0, tn = 0, fn = 0;
        for (int i = 0; i < labels.Count; i++)
        {
            bool actual = labels[i] switch
            {
                1f => true,
                0f => false,
                _ => throw new DriftWatchException($"label {labels[i].ToString(CultureInfo.InvariantCulture)} of row {i + 1} is neither 0 nor 1; the what-if needs a binary classifier's labels"),
            };
            bool predicted = probabilities[i] >= threshold;
            if (predicted && actual)
                tp++;
            else if (predicted)
                fp++;
            else if (actual)
                fn++;
            else
                tn++;
        }
        return new ConfusionMatrix(tp, fp, tn, fn);
    }
}

/// <summary>Precision, recall, F1 and accuracy: the figures of one confusion matrix, or their mean, spread or change.</summary>
/// <param name="Precision">Precision.</param>
/// <param name="Recall">Recall.</param>
/// <param name="F1">F1.</param>
/// <param name="Accuracy">Accuracy.</param>
public sealed record MetricSet(double Precision, double Recall, double F1, double Accuracy)
{
    /// <summary>The figures of <paramref name="matrix"/>.</summary>
    public static MetricSet Of(ConfusionMatrix matrix)
    {
        ArgumentNullException.ThrowIfNull(matrix);
        return new(matrix.Precision, matrix.Recall, matrix.F1, matrix.Accuracy);
    }

    /// <summary>This minus <paramref name="other"/>, figure by figure.</summary>
    public MetricSet Minus(MetricSet other)
    {
        ArgumentNullException.ThrowIfNull(other);
        return new(Precision - other.Precision, Recall - other.Recall, F1 - other.F1, Accuracy - other.Accuracy);
    }

    internal static MetricSet Mean(IReadOnlyList<MetricSet> sets) =>
        new(sets.Average(s => s.Precision), sets.Average(s => s.Recall), sets.Average(s => s.F1), sets.Average(s => s.Accuracy));

    // Sample standard deviation (n − 1); 0 for one set.
    internal static MetricSet Spread(IReadOnlyList<MetricSet> sets)
    {
        static double Sd(IEnumerable<double> values)
        {
            var list = values.ToList();
            if (list.Count < 2)
                return 0;
            double mean = list.Average();
            return Math.Sqrt(list.Sum(v => (v - mean) * (v - mean)) / (list.Count - 1));
        }
        return new(Sd(sets.Select(s => s.Precision)), Sd(sets.Select(s => s.Recall)), Sd(sets.Select(s => s.F1)), Sd(sets.Select(s => s.Accuracy)));
    }
}

/// <summary>How the masked units were chosen.</summary>
public enum PruningChoice
{
    /// <summary>Nothing masked: the reference.</summary>
    Unpruned,

    /// <summary>The consistently negative units first (most negative mean conductance first), then the smallest mean absolute conductance.</summary>
    ImportanceGuided,

    /// <summary>Uniformly at random, once per seed.</summary>
    Random,

    /// <summary>The units whose incoming weights have the smallest L1 norm.</summary>
    SmallestWeights,
}

/// <summary>One choice's outcome: the units masked and the confusion matrix (one per seed for random), with mean, spread and change.</summary>
/// <param name="Choice">How the units were chosen.</param>
/// <param name="MaskedUnits">The masked units, one list per draw (one draw except for random).</param>
/// <param name="Matrices">One confusion matrix per draw.</param>
/// <param name="Mean">The figures, averaged over draws.</param>
/// <param name="Spread">Their sample standard deviation over draws (0 with one draw).</param>
/// <param name="Change">Mean minus the unpruned model's figures.</param>
public sealed record PruningResult(PruningChoice Choice, IReadOnlyList<IReadOnlyList<int>> MaskedUnits, IReadOnlyList<ConfusionMatrix> Matrices, MetricSet Mean, MetricSet Spread, MetricSet Change);

/// <summary>A pruning what-if's report: the unpruned model and each choice, measured on one labelled evaluation set.</summary>
/// <param name="Layer">The layer's module path.</param>
/// <param name="Units">Units of the layer.</param>
/// <param name="Masked">Units masked by each choice.</param>
/// <param name="Rows">Evaluation rows.</param>
/// <param name="Options">The settings.</param>
/// <param name="Unpruned">The unpruned model.</param>
/// <param name="Choices">Importance-guided, random, smallest weights, in that order.</param>
/// <param name="WeightSource">The parameter whose rows gave the weight magnitudes.</param>
public sealed record PruningReport(string Layer, int Units, int Masked, int Rows, PruningOptions Options, PruningResult Unpruned, IReadOnlyList<PruningResult> Choices, string WeightSource);

/// <summary>
/// Masks a fraction of one layer's units (their outputs set to zero by a forward hook, removed afterwards) and measures a
/// binary classifier on a labelled evaluation set, for three ways of choosing the units. Nothing is changed in the model's weights.
/// </summary>
public static class PruningWhatIf
{
    /// <summary>Units in importance-guided order: consistently negative first (most negative mean first), then smallest mean absolute conductance.</summary>
    public static int[] ImportanceOrder(IReadOnlyList<UnitFigures> figures)
    {
        ArgumentNullException.ThrowIfNull(figures);
        var negative = figures.Where(f => f.Class == NeuronClass.ConsistentlyNegative).OrderBy(f => f.MeanConductance).ThenBy(f => f.Unit);
        var rest = figures.Where(f => f.Class != NeuronClass.ConsistentlyNegative).OrderBy(f => f.MeanAbsolute).ThenBy(f => f.Unit);
        return [.. negative.Concat(rest).Select(f => f.Unit)];
    }

    /// <summary>Units in order of increasing magnitude (ties by unit).</summary>
    public static int[] WeightOrder(IReadOnlyList<double> magnitudes)
    {
        ArgumentNullException.ThrowIfNull(magnitudes);
        return [.. Enumerable.Range(0, magnitudes.Count).OrderBy(u => magnitudes[u]).ThenBy(u => u)];
    }

    /// <summary><paramref name="count"/> distinct units of <paramref name="units"/>, drawn with <paramref name="seed"/>.</summary>
    public static int[] RandomChoice(int units, int count, int seed)
    {
        var order = Enumerable.Range(0, units).ToArray();
        new Random(seed).Shuffle(order);
        return [.. order.Take(count).Order()];
    }

    /// <summary>
    /// The L1 norm of each unit's incoming weights: the rows of the layer's own <c>weight</c>, or, for a layer without one
    /// (an activation), of the nearest <c>weight</c> before it in module order that has one row per unit.
    /// </summary>
    /// <exception cref="DriftWatchException">No such weight.</exception>
    public static (double[] Magnitudes, string Source) IncomingWeightMagnitudes(nn.Module root, WatchedLayer layer, int units)
    {
        ArgumentNullException.ThrowIfNull(root);
        ArgumentNullException.ThrowIfNull(layer);
        var modules = root.named_modules().ToList();
        int at = modules.FindIndex(m => m.name == layer.Path);
        for (int i = at; i >= 0; i--)
        {
            var (name, module) = modules[i];
            var weight = module.named_parameters(recurse: false).FirstOrDefault(p => p.name == "weight").parameter;
            if (weight is null || weight.dim() < 2 || weight.shape[0] != units)
                continue;
            using var noGrad = torch.no_grad();
            using var norms = weight.abs().reshape(units, -1).sum(dim: 1).to(ScalarType.Float64);
            return (norms.data<double>().ToArray(), name.Length == 0 ? "weight" : name + ".weight");
        }
        throw new DriftWatchException($"found no weight with {units} rows (one per unit) at or before layer '{layer.Path}'; the smallest-weight choice needs the weights feeding the layer");
    }

    /// <summary>The model's probability per row with <paramref name="masked"/> units of the layer set to zero.</summary>
    /// <exception cref="DriftWatchException">The target is not a binary classifier's logit or probability, or a unit is out of range.</exception>
    public static float[] Probabilities(IWatchedModel model, WatchedLayer layer, ProbeRows rows, AttributionTarget target, IReadOnlyCollection<int> masked, int chunkRows)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(layer);
        ArgumentNullException.ThrowIfNull(rows);
        ArgumentNullException.ThrowIfNull(target);
        ArgumentNullException.ThrowIfNull(masked);
        if (target.Kind is not (TargetKind.Logit or TargetKind.Probability))
            throw new DriftWatchException($"the pruning what-if measures a binary classifier; the run's target is '{target.Label}' (it needs logit or probability)");
        var result = new float[rows.Count];
        using var scope = torch.NewDisposeScope();
        using var noGrad = torch.no_grad();
        Tensor? mask = null;
        int calls = 0;
        var dense = torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]);
        var categorical = torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount]);
        layer.WithHook(
            output =>
            {
                calls++;
                var flat = output.reshape(output.shape[0], -1);
                if (mask is null)
                {
                    if (masked.Any(u => u < 0 || u >= flat.shape[1]))
                        throw new DriftWatchException($"a masked unit is out of range: layer '{layer.Path}' has {flat.shape[1]} units");
                    var keep = Enumerable.Repeat(1f, (int)flat.shape[1]).ToArray();
                    foreach (int u in masked)
                        keep[u] = 0f;
                    mask = torch.tensor(keep).to(flat.dtype);
                }
                return masked.Count == 0 ? null : (flat * mask).reshape(output.shape);
            },
            () =>
            {
                for (int start = 0; start < rows.Count; start += chunkRows)
                {
                    using var chunk = torch.NewDisposeScope();
                    int end = Math.Min(rows.Count, start + chunkRows);
                    var features = model.Encode(dense[start..end], categorical[start..end]);
                    var score = target.Select(model.Score(features));
                    var probability = target.Kind == TargetKind.Logit ? score.sigmoid() : score;
                    Gradients.CopyTo(probability, result, start);
                }
                return 0;
            });
        if (calls == 0)
            throw new DriftWatchException($"the model never called layer '{layer.Path}' while scoring; name a layer its score step invokes with .call(x)");
        return result;
    }

    /// <summary>Runs the what-if on <paramref name="model"/> (weights of the chosen epoch loaded).</summary>
    /// <param name="model">The model; it is put in eval mode and restored afterwards.</param>
    /// <param name="layer">The layer whose units are masked.</param>
    /// <param name="evaluation">Labelled rows (labels 0 or 1).</param>
    /// <param name="target">The run's target: logit (a sigmoid is applied) or probability.</param>
    /// <param name="importance">Each unit's figures from the neuron audit of the chosen epoch.</param>
    /// <param name="options">Fraction, seeds, threshold.</param>
    /// <exception cref="DriftWatchException">Bad options, unlabelled rows, a layer whose width differs from the audit's, or a target that is not a binary classifier's.</exception>
    public static PruningReport Run(IWatchedModel model, WatchedLayer layer, ProbeRows evaluation, AttributionTarget target, IReadOnlyList<UnitFigures> importance, PruningOptions options)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(layer);
        ArgumentNullException.ThrowIfNull(evaluation);
        ArgumentNullException.ThrowIfNull(importance);
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        if (evaluation.Labels is null || evaluation.Count == 0)
            throw new DriftWatchException("the evaluation rows have no labels; the what-if compares predictions with labels");
        int units = importance.Count;
        if (units < 2)
            throw new DriftWatchException($"layer '{layer.Path}' has {units} unit(s); masking a fraction needs at least 2");

        var module = model.Module;
        bool wasTraining = module.training;
        module.eval();
        try
        {
            int width = LayerWidth(model, layer, evaluation);
            if (width != units)
                throw new DriftWatchException($"layer '{layer.Path}' of this model has {width} units but the audit has {units}; rebuild the model the run trained");
            var (magnitudes, source) = IncomingWeightMagnitudes(module, layer, units);
            int count = options.MaskedOf(units);
            ConfusionMatrix Measure(IReadOnlyCollection<int> masked) =>
                ConfusionMatrix.Count(Probabilities(model, layer, evaluation, target, masked, options.ChunkRows), evaluation.Labels, options.Threshold);

            var reference = Measure([]);
            var referenceFigures = MetricSet.Of(reference);
            PruningResult Result(PruningChoice choice, List<int[]> draws)
            {
                var matrices = draws.Select(d => Measure(d)).ToList();
                var figures = matrices.Select(MetricSet.Of).ToList();
                var mean = MetricSet.Mean(figures);
                return new PruningResult(choice, [.. draws.Select(d => (IReadOnlyList<int>)[.. d.Order()])], matrices, mean, MetricSet.Spread(figures), mean.Minus(referenceFigures));
            }

            var unpruned = new PruningResult(PruningChoice.Unpruned, [Array.Empty<int>()], [reference], referenceFigures, new MetricSet(0, 0, 0, 0), new MetricSet(0, 0, 0, 0));
            var choices = new List<PruningResult>
            {
                Result(PruningChoice.ImportanceGuided, [ImportanceOrder(importance)[..count]]),
                Result(PruningChoice.Random, [.. Enumerable.Range(options.Seed, options.Seeds).Select(s => RandomChoice(units, count, s))]),
                Result(PruningChoice.SmallestWeights, [WeightOrder(magnitudes)[..count]]),
            };
            return new PruningReport(layer.Path, units, count, evaluation.Count, options, unpruned, choices, source);
        }
        finally
        {
            module.train(wasTraining);
        }
    }

    /// <summary>The number of units of <paramref name="layer"/>: its output's width for the first row of <paramref name="rows"/>.</summary>
    public static int LayerWidth(IWatchedModel model, WatchedLayer layer, ProbeRows rows)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(layer);
        ArgumentNullException.ThrowIfNull(rows);
        using var scope = torch.NewDisposeScope();
        using var noGrad = torch.no_grad();
        var one = rows.Take([0]);
        var features = model.Encode(torch.tensor(one.Dense, [1, one.DenseCount]), torch.tensor(one.Categorical, [1, one.CategoricalCount]));
        var (_, output) = layer.ScoreAndOutput(model.Score, features);
        return (int)output.reshape(1, -1).shape[1];
    }

    /// <summary>The plain-English name of a choice, as tables print it.</summary>
    public static string Label(PruningChoice choice) => choice switch
    {
        PruningChoice.Unpruned => "unpruned",
        PruningChoice.ImportanceGuided => "importance-guided",
        PruningChoice.Random => "random",
        _ => "smallest weights",
    };
}
