using System.Collections.Immutable;
using DriftWatch.Attribution;

namespace DriftWatch.Detection;

/// <summary>What the detector reads for one epoch.</summary>
/// <param name="Epoch">The epoch.</param>
/// <param name="Metrics">Metrics by stored key (<c>train_loss</c>, <c>validation_loss</c>, …).</param>
/// <param name="Map">The primary method's attribution map, or null when the epoch was not attributed.</param>
/// <param name="Reported">Findings the monitor already raised for this epoch (failures, numerical trouble).</param>
public sealed record EpochInput(int Epoch, IReadOnlyDictionary<string, double> Metrics, AttributionMap? Map, ImmutableArray<Finding> Reported);

/// <summary>Per-feature and epoch-level statistics of one epoch, with their noise floors; arrays are indexed by feature.</summary>
public sealed record EpochStatistics
{
    /// <summary>The epoch.</summary>
    public required int Epoch { get; init; }

    /// <summary>Whether this epoch's attributions were usable (present, finite).</summary>
    public required bool Trusted { get; init; }

    /// <summary>Share of mean |attribution| on the held-out half.</summary>
    public ImmutableArray<double> ShareHeldOut { get; init; } = [];

    /// <summary>Share on the training half.</summary>
    public ImmutableArray<double> ShareTraining { get; init; } = [];

    /// <summary>90% bootstrap width of the held-out share.</summary>
    public ImmutableArray<double> ShareHeldOutWidth { get; init; } = [];

    /// <summary>90% bootstrap width of the training share.</summary>
    public ImmutableArray<double> ShareTrainingWidth { get; init; } = [];

    /// <summary>Divergence: training share minus held-out share.</summary>
    public ImmutableArray<double> ShareGap { get; init; } = [];

    /// <summary>90% bootstrap width of the share gap (halves resampled separately).</summary>
    public ImmutableArray<double> ShareGapWidth { get; init; } = [];

    /// <summary>Label alignment on the held-out half (empty without binary labels).</summary>
    public ImmutableArray<double> AlignmentHeldOut { get; init; } = [];

    /// <summary>Label alignment on the training half.</summary>
    public ImmutableArray<double> AlignmentTraining { get; init; } = [];

    /// <summary>Training alignment minus held-out alignment.</summary>
    public ImmutableArray<double> AlignmentGap { get; init; } = [];

    /// <summary>90% bootstrap width of the alignment gap.</summary>
    public ImmutableArray<double> AlignmentGapWidth { get; init; } = [];

    /// <summary>
    /// One-sided p-value of the share gap under the half-exchange null (<see cref="HalfExchangeNull"/>); empty when the run
    /// has no split-consistency check (the null is drawn only for runs whose leak rule reads it).
    /// </summary>
    public ImmutableArray<double> ShareGapPValue { get; init; } = [];

    /// <summary>One-sided p-value of the alignment gap under the half-exchange null; empty without it or without alignment.</summary>
    public ImmutableArray<double> AlignmentGapPValue { get; init; } = [];

    /// <summary>90% bootstrap width of the held-out lead: top feature's share minus the runner-up's.</summary>
    public double LeadWidthHeldOut { get; init; }

    /// <summary>90% bootstrap width of the training-half lead.</summary>
    public double LeadWidthTraining { get; init; }

    /// <summary>Whether the feature's held-out share series has shifted by the CUSUM rule so far (descriptive).</summary>
    public ImmutableArray<bool> Shifted { get; init; } = [];

    /// <summary>Drift score: 1 − Spearman ρ between this and the previous attributed epoch's held-out shares; NaN for the first.</summary>
    public double Drift { get; init; } = double.NaN;

    /// <summary>Spearman ρ of held-out shares against the best-validation epoch's; NaN when not known.</summary>
    public double RankAgreementWithBest { get; init; } = double.NaN;

    /// <summary>Jensen–Shannon divergence of held-out shares from the previous attributed epoch's (nats, ≤ ln 2).</summary>
    public double JensenShannonFromPrevious { get; init; } = double.NaN;

    /// <summary>Jaccard similarity of the top-5 held-out features with the previous attributed epoch's.</summary>
    public double TopFiveJaccard { get; init; } = double.NaN;

    /// <summary>Prechelt's generalisation loss GL (percent); NaN without a validation loss.</summary>
    public double GeneralisationLoss { get; init; } = double.NaN;
}

/// <summary>The detector's result for one epoch: statistics, findings and the gate's verdict.</summary>
/// <param name="Statistics">The epoch's statistics.</param>
/// <param name="Verdict">The verdict, with the findings behind it.</param>
public sealed record Assessment(EpochStatistics Statistics, Verdict Verdict);
