using System.Collections.Immutable;
using System.Runtime.InteropServices;
using DriftWatch.Probing;

namespace DriftWatch.Demo.Greenhouse;

/// <summary>One generated set of batches (training or validation) in the model's input form, with its ground truth.</summary>
public sealed class GreenhouseSplit
{
    internal GreenhouseSplit(string name, ProbeRows rows, float[] rawDense, float[] passProbability, bool[] labelFlipped)
    {
        Name = name;
        Rows = rows;
        RawDense = ImmutableCollectionsMarshal.AsImmutableArray(rawDense);
        PassProbability = ImmutableCollectionsMarshal.AsImmutableArray(passProbability);
        LabelFlipped = ImmutableCollectionsMarshal.AsImmutableArray(labelFlipped);
    }

    /// <summary><c>training</c> or <c>validation</c>.</summary>
    public string Name { get; }

    /// <summary>The rows as the model sees them: standardised dense values, categorical ids, labels (1 pass, 0 fail).</summary>
    public ProbeRows Rows { get; }

    /// <summary>Number of rows.</summary>
    public int Count => Rows.Count;

    /// <summary>The recorded grade per row (1 pass, 0 fail), after any label flips.</summary>
    public ImmutableArray<float> Labels => ImmutableCollectionsMarshal.AsImmutableArray(Rows.Labels!);

    /// <summary>Dense values in raw units (°C, %, h/day, ppm, L/m²/day, days, mV), row-major like <see cref="Rows"/>.</summary>
    public ImmutableArray<float> RawDense { get; }

    /// <summary>The grading rule's true probability of a pass per row, before label noise and flips.</summary>
    public ImmutableArray<float> PassProbability { get; }

    /// <summary>Whether each row's recorded grade was flipped (noisy-labels scenario; training rows only).</summary>
    public ImmutableArray<bool> LabelFlipped { get; }

    /// <summary>Fraction of rows graded pass.</summary>
    public double PassRate => Labels.Average(l => (double)l);

    /// <summary>The ids of one categorical feature, by its index among the categorical features.</summary>
    public long[] CategoricalColumn(int index)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(index);
        ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(index, Rows.CategoricalCount);
        var column = new long[Count];
        for (int r = 0; r < Count; r++)
            column[r] = Rows.Categorical[r * Rows.CategoricalCount + index];
        return column;
    }

    /// <summary>
    /// Mean binary cross-entropy of the rule's true probabilities against the recorded grades: what a model that
    /// knew the rule exactly would score here (nats per row).
    /// </summary>
    public double RuleLoss()
    {
        double total = 0;
        for (int r = 0; r < Count; r++)
        {
            double p = Math.Clamp(PassProbability[r], 1e-7, 1 - 1e-7);
            total -= Labels[r] > 0.5f ? Math.Log(p) : Math.Log(1 - p);
        }
        return total / Count;
    }
}
