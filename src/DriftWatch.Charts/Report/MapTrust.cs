using System.Collections.Immutable;
using DriftWatch.Detection;
using DriftWatch.Storage;

namespace DriftWatch.Charts.Report;

/// <summary>How far to trust one method's map at one epoch: its rank agreement with the verdict's method and its quality figures.</summary>
/// <param name="Epoch">The epoch.</param>
/// <param name="Method">The map's stored method name (configured or re-attributed; escape it for display).</param>
/// <param name="Agreement">Spearman ρ of held-out importance with the verdict's method; for the verdict's method itself, the lowest ρ with any other method; NaN when none was stored.</param>
/// <param name="Measured">Whether quality figures were measured for this map.</param>
/// <param name="RelativeInfidelity">Infidelity over the mean squared output change (Yeh et al. 2019); NaN when not measured.</param>
/// <param name="RelativeMaxSensitivity">Max-sensitivity over the norm of the row's own scores (Yeh et al. 2019); NaN when not measured.</param>
/// <param name="Infidelity">Infidelity in squared output units; NaN when not measured.</param>
/// <param name="MaxSensitivity">Max-sensitivity in output units; NaN when not measured.</param>
/// <param name="Rows">Probe rows the figures were measured on.</param>
public sealed record MapTrust(
    int Epoch,
    string Method,
    double Agreement,
    bool Measured,
    double RelativeInfidelity,
    double RelativeMaxSensitivity,
    double Infidelity,
    double MaxSensitivity,
    int Rows);

/// <summary>One method's trust figures summarised over a run.</summary>
/// <param name="Method">The stored method name.</param>
/// <param name="Epochs">Epochs with a trust document.</param>
/// <param name="MeasuredEpochs">Epochs with quality figures.</param>
/// <param name="MedianInfidelity">Median relative infidelity over measured epochs; NaN when none.</param>
/// <param name="LastInfidelity">Relative infidelity at the last measured epoch; NaN when none.</param>
/// <param name="MedianSensitivity">Median relative max-sensitivity over measured epochs; NaN when none.</param>
/// <param name="LastSensitivity">Relative max-sensitivity at the last measured epoch; NaN when none.</param>
/// <param name="MedianAgreement">Median ρ (see <see cref="MapTrust.Agreement"/>); NaN when none.</param>
/// <param name="LowestAgreement">The lowest ρ; NaN when none.</param>
/// <param name="LowestAgreementEpoch">The epoch of the lowest ρ, or −1.</param>
public sealed record MethodTrustSummary(
    string Method,
    int Epochs,
    int MeasuredEpochs,
    double MedianInfidelity,
    double LastInfidelity,
    double MedianSensitivity,
    double LastSensitivity,
    double MedianAgreement,
    double LowestAgreement,
    int LowestAgreementEpoch);

/// <summary>Reads and summarises the trust documents (agreement and quality figures) of a run, every method.</summary>
public static class RunTrust
{
    /// <summary>Every stored trust document of the run's complete epochs, in epoch order, then the run's configured methods in their order, then re-attributed maps by name.</summary>
    /// <param name="store">An open store.</param>
    /// <param name="runName">The run's name.</param>
    /// <exception cref="StoreException">No run of that name is in the store.</exception>
    public static ImmutableArray<MapTrust> Load(RunStore store, string runName)
    {
        ArgumentNullException.ThrowIfNull(store);
        return Load(store, store.GetRun(runName));
    }

    /// <summary>The trust documents of the epochs <paramref name="history"/> holds, ordered as <see cref="Load(RunStore, string)"/> orders them.</summary>
    /// <remarks>Read after the history, the store may hold epochs a writer committed since; their documents are left out, so trust and history describe the same epochs.</remarks>
    /// <param name="store">The open store the history came from.</param>
    /// <param name="history">The run's history.</param>
    /// <exception cref="StoreException">No run of that name is in the store.</exception>
    public static ImmutableArray<MapTrust> Load(RunStore store, RunHistory history)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(history);
        var epochs = history.Epochs.Select(e => e.Epoch).ToHashSet();
        return [.. Load(store, history.RunName).Where(t => epochs.Contains(t.Epoch))];
    }

    private static ImmutableArray<MapTrust> Load(RunStore store, RunDocument run)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(run);
        string primary = RunReview.PrimaryMethod(run);
        var configured = run.Methods.Select(m => m.Name).ToList();
        int Rank(string method) => configured.IndexOf(method) is int i and >= 0 ? i : configured.Count;
        return store.Quality(run.Id).OrderBy(q => q.Epoch).ThenBy(q => Rank(q.Method ?? "")).ThenBy(q => q.Method, StringComparer.Ordinal).Select(q =>
        {
            var agreement = q.Agreement ?? [];
            double rho = q.Method == primary
                ? agreement.Select(a => a.Spearman).Where(double.IsFinite).DefaultIfEmpty(double.NaN).Min()
                : agreement.FirstOrDefault(a => a.Method == primary)?.Spearman ?? double.NaN;
            return new MapTrust(q.Epoch, q.Method ?? "", rho, q.Measured, q.RelativeInfidelity, q.RelativeMaxSensitivity, q.Infidelity, q.MaxSensitivity, q.QualityRows);
        }).ToImmutableArray();
    }

    /// <summary>Per method, in the order methods first appear: medians, last values and the lowest agreement.</summary>
    public static IReadOnlyList<MethodTrustSummary> Summarise(IReadOnlyList<MapTrust> trust)
    {
        ArgumentNullException.ThrowIfNull(trust);
        return trust.GroupBy(t => t.Method, StringComparer.Ordinal).Select(g =>
        {
            var measured = g.Where(t => t.Measured).OrderBy(t => t.Epoch).ToList();
            var agreed = g.Where(t => double.IsFinite(t.Agreement)).ToList();
            var lowest = agreed.OrderBy(t => t.Agreement).ThenBy(t => t.Epoch).FirstOrDefault();
            return new MethodTrustSummary(
                g.Key,
                g.Count(),
                measured.Count,
                Median(measured.Select(t => t.RelativeInfidelity)),
                measured.Count == 0 ? double.NaN : measured[^1].RelativeInfidelity,
                Median(measured.Select(t => t.RelativeMaxSensitivity)),
                measured.Count == 0 ? double.NaN : measured[^1].RelativeMaxSensitivity,
                Median(agreed.Select(t => t.Agreement)),
                lowest?.Agreement ?? double.NaN,
                lowest?.Epoch ?? -1);
        }).ToList();
    }

    private static double Median(IEnumerable<double> values)
    {
        var sorted = values.Where(double.IsFinite).Order().ToList();
        if (sorted.Count == 0)
            return double.NaN;
        int middle = sorted.Count / 2;
        return sorted.Count % 2 == 1 ? sorted[middle] : (sorted[middle - 1] + sorted[middle]) / 2;
    }
}
