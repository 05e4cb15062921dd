using System.Collections.Immutable;
using System.Globalization;
using System.Runtime.InteropServices;
using DriftWatch.Model;
using DriftWatch.Storage;

namespace DriftWatch.Layers;

/// <summary>How a hidden unit behaves across the probe rows, judged from its conductance.</summary>
public enum NeuronClass
{
    /// <summary>Where it is not near zero, it pushes against the predicted class on nearly every row.</summary>
    ConsistentlyNegative,

    /// <summary>Near zero on nearly every row: it carries nothing (a dead ReLU, for instance).</summary>
    Inactive,

    /// <summary>Pushes for the predicted class on some rows and against it on others.</summary>
    Mixed,

    /// <summary>Where it is not near zero, it pushes for the predicted class on nearly every row.</summary>
    Positive,
}

/// <summary>The thresholds of the neuron audit; build once, then <see cref="Validate"/>.</summary>
public sealed record NeuronAuditOptions
{
    /// <summary>
    /// A unit's conductance on a row is near zero when its size is at most this fraction of the row's mean absolute
    /// conductance over the layer's units. Default 0.1 (a tenth of an average unit).
    /// </summary>
    public double NearZero { get; init; } = 0.1;

    /// <summary>A unit is inactive when it is near zero on at least this fraction of rows. Default 0.9.</summary>
    public double InactiveShare { get; init; } = 0.9;

    /// <summary>Of the rows where a unit is not near zero, the fraction that must have one sign to call it consistently negative or positive. Default 0.8.</summary>
    public double ConsistentShare { get; init; } = 0.8;

    /// <summary>
    /// Sign each row's conductance by the class the model predicts for it (logit above 0, probability above ½), so negative
    /// means "against the predicted class"; when false, or for regression and multi-class targets, the raw sign is used. Default true.
    /// </summary>
    public bool TowardPrediction { get; init; } = true;

    /// <summary>Checks every threshold, naming the first bad one.</summary>
    /// <exception cref="DriftWatchException">A threshold outside its range.</exception>
    public void Validate()
    {
        if (!(NearZero >= 0 && NearZero < 10))
            throw new DriftWatchException($"the near-zero threshold must be at least 0 and below 10 (a fraction of a row's mean unit); got {NearZero.ToString(CultureInfo.InvariantCulture)}");
        if (!(InactiveShare > 0 && InactiveShare <= 1))
            throw new DriftWatchException($"the inactive share must be above 0 and at most 1; got {InactiveShare.ToString(CultureInfo.InvariantCulture)}");
        if (!(ConsistentShare > 0.5 && ConsistentShare <= 1))
            throw new DriftWatchException($"the consistent share must be above 0.5 and at most 1; got {ConsistentShare.ToString(CultureInfo.InvariantCulture)}");
    }

    /// <summary>The thresholds as text, invariant culture.</summary>
    public IReadOnlyDictionary<string, string> ToSettings() => new SortedDictionary<string, string>(StringComparer.Ordinal)
    {
        ["near-zero"] = NearZero.ToString("R", CultureInfo.InvariantCulture),
        ["inactive-share"] = InactiveShare.ToString("R", CultureInfo.InvariantCulture),
        ["consistent-share"] = ConsistentShare.ToString("R", CultureInfo.InvariantCulture),
        ["toward-prediction"] = TowardPrediction ? "true" : "false",
    };
}

/// <summary>One unit's figures over a set of rows: the fractions of rows with each sign, its mean conductance and its class.</summary>
/// <param name="Unit">The unit, from 0.</param>
/// <param name="Positive">Fraction of rows where its (oriented) conductance is above the near-zero band.</param>
/// <param name="Negative">Fraction of rows where it is below the band.</param>
/// <param name="NearZero">Fraction of rows inside the band.</param>
/// <param name="MeanConductance">Mean oriented conductance, target units.</param>
/// <param name="MeanAbsolute">Mean absolute conductance, target units.</param>
/// <param name="Class">The class these fractions give.</param>
public sealed record UnitFigures(int Unit, double Positive, double Negative, double NearZero, double MeanConductance, double MeanAbsolute, NeuronClass Class);

/// <summary>A unit whose class changed from one audited epoch to the next.</summary>
/// <param name="Unit">The unit.</param>
/// <param name="Epoch">The epoch at which it has its new class.</param>
/// <param name="From">Its class at the audited epoch before.</param>
/// <param name="To">Its class at <paramref name="Epoch"/>.</param>
public sealed record ClassChange(int Unit, int Epoch, NeuronClass From, NeuronClass To);

/// <summary>
/// The neuron audit of one layer: per unit, across the probe rows and epochs, the fraction of rows where its conductance is
/// positive, negative or near zero, the class that gives, and how the classes change from epoch to epoch.
/// </summary>
public sealed class NeuronAudit
{
    private NeuronAudit(string layer, string method, int units, int rows, int[] epochs, UnitFigures[][] byEpoch, UnitFigures[] overall, IReadOnlyList<ClassChange> changes, NeuronAuditOptions options, bool oriented)
    {
        Layer = layer;
        Method = method;
        Units = units;
        Rows = rows;
        Epochs = epochs;
        ByEpoch = [.. byEpoch.Select(ImmutableCollectionsMarshal.AsImmutableArray)];
        Overall = overall;
        Changes = changes;
        Options = options;
        Oriented = oriented;
    }

    /// <summary>The layer's module path.</summary>
    public string Layer { get; }

    /// <summary>The layer method whose maps were read.</summary>
    public string Method { get; }

    /// <summary>Units of the layer.</summary>
    public int Units { get; }

    /// <summary>Probe rows audited per epoch.</summary>
    public int Rows { get; }

    /// <summary>The audited epochs, increasing.</summary>
    public IReadOnlyList<int> Epochs { get; }

    /// <summary>Per audited epoch (same order as <see cref="Epochs"/>), every unit's figures.</summary>
    public IReadOnlyList<ImmutableArray<UnitFigures>> ByEpoch { get; }

    /// <summary>Every unit's figures over the rows of all audited epochs pooled.</summary>
    public IReadOnlyList<UnitFigures> Overall { get; }

    /// <summary>Every change of class between consecutive audited epochs, by unit then epoch.</summary>
    public IReadOnlyList<ClassChange> Changes { get; }

    /// <summary>The thresholds used.</summary>
    public NeuronAuditOptions Options { get; }

    /// <summary>Whether signs are relative to the predicted class (true) or raw (false).</summary>
    public bool Oriented { get; }

    /// <summary>How many units have <paramref name="kind"/> over all audited epochs pooled.</summary>
    public int Count(NeuronClass kind) => Overall.Count(u => u.Class == kind);

    /// <summary>How many units have <paramref name="kind"/> at the audited epoch with index <paramref name="epochIndex"/>.</summary>
    public int Count(NeuronClass kind, int epochIndex) => ByEpoch[epochIndex].Count(u => u.Class == kind);

    /// <summary>The plain-English name of a class, as tables and charts print it.</summary>
    public static string Label(NeuronClass kind) => kind switch
    {
        NeuronClass.ConsistentlyNegative => "consistently negative",
        NeuronClass.Inactive => "inactive",
        NeuronClass.Mixed => "mixed",
        _ => "positive",
    };

    /// <summary>Audits the layer maps of one layer and method.</summary>
    /// <param name="maps">The maps, one per epoch, all of one layer and method with the same number of units.</param>
    /// <param name="target">The run's target label (<c>logit</c>, <c>probability</c>, …), which says how to read the predicted class.</param>
    /// <param name="options">The thresholds.</param>
    /// <param name="rows">The probe rows to audit (indexes into each map), or null for all.</param>
    /// <exception cref="DriftWatchException">No maps, maps of several layers or widths, or a row index out of range.</exception>
    internal static NeuronAudit Run(IReadOnlyList<LayerMapDocument> maps, string target, NeuronAuditOptions options, IReadOnlyList<int>? rows = null)
    {
        ArgumentNullException.ThrowIfNull(maps);
        ArgumentNullException.ThrowIfNull(target);
        ArgumentNullException.ThrowIfNull(options);
        options.Validate();
        if (maps.Count == 0)
            throw new DriftWatchException("no layer maps to audit");
        var first = maps[0];
        if (maps.Any(m => m.Layer != first.Layer || m.Method != first.Method || m.Units != first.Units || m.Rows != first.Rows))
            throw new DriftWatchException($"the layer maps to audit must all be of one layer, method and shape; got '{first.Layer}' ({first.Method}, {first.Units} units) with others");
        if (maps.Select(m => m.Epoch).Distinct().Count() != maps.Count)
            throw new DriftWatchException("the layer maps to audit have one epoch twice; audit one method and target at a time");
        var chosen = rows ?? Enumerable.Range(0, first.Rows).ToList();
        if (chosen.Count == 0)
            throw new DriftWatchException("no probe rows to audit");
        if (chosen.Any(r => r < 0 || r >= first.Rows))
            throw new DriftWatchException($"probe row index out of range; the maps have {first.Rows} rows");

        var kind = AttributionTarget.Parse(target).Kind;
        bool oriented = options.TowardPrediction && kind is TargetKind.Logit or TargetKind.Probability;
        int units = first.Units;
        var ordered = maps.OrderBy(m => m.Epoch).ToList();
        var overall = new Tally(units);
        var byEpoch = new UnitFigures[ordered.Count][];
        for (int e = 0; e < ordered.Count; e++)
        {
            var tally = new Tally(units);
            var scores = FloatBytes.ToFloats(ordered[e].Scores);
            var outputs = FloatBytes.ToFloats(ordered[e].Outputs);
            foreach (int r in chosen)
            {
                double sign = !oriented ? 1 : kind == TargetKind.Logit ? (outputs[r] >= 0 ? 1 : -1) : (outputs[r] >= 0.5 ? 1 : -1);
                double meanAbsolute = 0;
                for (int u = 0; u < units; u++)
                    meanAbsolute += Math.Abs(scores[r * units + u]);
                meanAbsolute /= Math.Max(1, units);
                double band = options.NearZero * meanAbsolute;
                for (int u = 0; u < units; u++)
                {
                    double value = sign * scores[r * units + u];
                    tally.Add(u, value, band);
                    overall.Add(u, value, band);
                }
            }
            byEpoch[e] = tally.Figures(options);
        }
        var changes = new List<ClassChange>();
        for (int u = 0; u < units; u++)
        {
            for (int e = 1; e < ordered.Count; e++)
            {
                if (byEpoch[e][u].Class != byEpoch[e - 1][u].Class)
                    changes.Add(new ClassChange(u, ordered[e].Epoch, byEpoch[e - 1][u].Class, byEpoch[e][u].Class));
            }
        }
        return new NeuronAudit(first.Layer, first.Method, units, chosen.Count, [.. ordered.Select(m => m.Epoch)], byEpoch, overall.Figures(options), changes, options, oriented);
    }

    /// <summary>The class that fractions of rows give under <paramref name="options"/>.</summary>
    public static NeuronClass Classify(double positive, double negative, double nearZero, NeuronAuditOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        if (nearZero >= options.InactiveShare)
            return NeuronClass.Inactive;
        double active = positive + negative;
        if (active > 0 && negative / active >= options.ConsistentShare)
            return NeuronClass.ConsistentlyNegative;
        if (active > 0 && positive / active >= options.ConsistentShare)
            return NeuronClass.Positive;
        return NeuronClass.Mixed;
    }

    private sealed class Tally(int units)
    {
        private readonly long[] _positive = new long[units];
        private readonly long[] _negative = new long[units];
        private readonly long[] _zero = new long[units];
        private readonly double[] _sum = new double[units];
        private readonly double[] _absolute = new double[units];

        public void Add(int unit, double value, double band)
        {
            if (Math.Abs(value) <= band)
                _zero[unit]++;
            else if (value > 0)
                _positive[unit]++;
            else
                _negative[unit]++;
            _sum[unit] += value;
            _absolute[unit] += Math.Abs(value);
        }

        public UnitFigures[] Figures(NeuronAuditOptions options)
        {
            var figures = new UnitFigures[units];
            for (int u = 0; u < units; u++)
            {
                double n = Math.Max(1, _positive[u] + _negative[u] + _zero[u]);
                double positive = _positive[u] / n, negative = _negative[u] / n, zero = _zero[u] / n;
                figures[u] = new UnitFigures(u, positive, negative, zero, _sum[u] / n, _absolute[u] / n, Classify(positive, negative, zero, options));
            }
            return figures;
        }
    }
}
