namespace DriftWatch;

/// <summary>The stored keys of the metrics every run reports, as they appear in an epoch's metrics.</summary>
public static class MetricKeys
{
    /// <summary>Mean training loss over the epoch.</summary>
    public const string TrainLoss = "train_loss";

    /// <summary>Validation loss at the end of the epoch.</summary>
    public const string ValidationLoss = "validation_loss";
}
