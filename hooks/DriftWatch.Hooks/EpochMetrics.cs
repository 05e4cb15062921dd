using System.Collections.Immutable;

namespace DriftWatch.Hooks;

/// <summary>What the training loop measured at the end of an epoch.</summary>
/// <param name="TrainLoss">Mean training loss over the epoch.</param>
/// <param name="ValidationLoss">Validation loss at the end of the epoch.</param>
public sealed record EpochMetrics(double TrainLoss, double ValidationLoss)
{
    /// <summary>Stored key of the training loss.</summary>
    public const string TrainLossKey = MetricKeys.TrainLoss;

    /// <summary>Stored key of the validation loss.</summary>
    public const string ValidationLossKey = MetricKeys.ValidationLoss;

    /// <summary>Any other metrics by name (accuracy, AUC…), stored beside the losses.</summary>
    public ImmutableDictionary<string, double> Others { get; init; } = ImmutableDictionary<string, double>.Empty;

    /// <summary>Adds one more named metric.</summary>
    public EpochMetrics With(string name, double value)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(name);
        return this with { Others = Others.SetItem(name, value) };
    }

    /// <summary>All metrics by stored key.</summary>
    public Dictionary<string, double> ToDictionary()
    {
        var all = new Dictionary<string, double>(Others, StringComparer.Ordinal)
        {
            [TrainLossKey] = TrainLoss,
            [ValidationLossKey] = ValidationLoss,
        };
        return all;
    }
}
