using System.Globalization;
using DriftWatch.Detection;
using DriftWatch.Model;

namespace DriftWatch.Storage;

/// <summary>
/// Structural checks of documents read back from a store, so a damaged file (a flipped bit, a page copied over another)
/// is reported as a damaged store instead of failing later inside a table, a chart or the detector.
/// </summary>
/// <remarks>
/// LiteDB keeps no checksums: damage inside a stored number reads as another number and cannot be seen here. What is
/// checked is everything the readers rely on: known kinds, array lengths that agree with the run's shape, parseable keys.
/// </remarks>
internal static class StoreChecks
{
    public static RunDocument Run(string path, RunDocument run)
    {
        string where = $"run #{run.Id}";
        Require(path, Present(run.Name, run.Features, run.Methods, run.ProbeDense, run.ProbeCategorical, run.TrainingValueCounts, run.Description, run.ProbeHash),
            $"{where} has missing fields");
        Require(path, run.Features.All(f => Present(f, f?.Name) && Known<FeatureKind>(f!.Kind) && f.ColumnCount >= 1),
            $"{where} ('{run.Name}') has a feature of unknown kind or width");
        int column = 0;
        foreach (var feature in run.Features)
        {
            Require(path, feature.FirstColumn == column, $"run '{run.Name}': feature '{feature.Name}' starts at column {feature.FirstColumn}, expected {column}");
            column += feature.ColumnCount;
        }
        Require(path, run.HeldOutRows >= 0 && run.TrainingRows >= 0 && run.DenseCount >= 0 && run.CategoricalCount >= 0,
            $"run '{run.Name}' has a negative row or input count");
        long rows = (long)run.HeldOutRows + run.TrainingRows;
        Require(path, run.ProbeDense.LongLength == rows * run.DenseCount * sizeof(float)
            && run.ProbeCategorical.LongLength == rows * run.CategoricalCount * sizeof(long)
            && (run.ProbeLabels is null || run.ProbeLabels.LongLength == rows * sizeof(float)),
            $"run '{run.Name}': the probe rows' bytes do not match {rows} rows");
        Require(path, run.CategoricalCount == run.Features.Count(f => f.Kind == nameof(FeatureKind.Categorical)),
            $"run '{run.Name}': {run.CategoricalCount} categorical inputs but {run.Features.Count(f => f.Kind == nameof(FeatureKind.Categorical))} categorical features");
        Require(path, run.Methods.All(m => Present(m, m?.Name, m?.Settings)), $"run '{run.Name}' has a damaged method record");
        Require(path, run.TrainingValueCounts.Values.All(v => Present(v) && v.Keys.All(k => long.TryParse(k, NumberStyles.Integer, CultureInfo.InvariantCulture, out _))),
            $"run '{run.Name}' has damaged training value counts");
        // Runs registered before the split check was recorded have none; a present one must fit the run's raw inputs.
        Require(path, run.SplitCheck is null || (Present(run.SplitCheck.Inputs, run.SplitCheck.Score) && run.SplitCheck.Inputs.All(i => Present(i)
            && Known<Probing.RawInputKind>(i!.Kind) && i.Index >= 0
            && i.Index < (i.Kind == nameof(Probing.RawInputKind.Dense) ? run.DenseCount : run.CategoricalCount))),
            $"run '{run.Name}' has a damaged split-consistency check");
        return run;
    }

    public static MapDocument Map(string path, MapDocument map, RunDocument? run)
    {
        string where = $"the {map.Method} map of epoch {map.Epoch}";
        Require(path, Present(map.Scores, map.HeldOut, map.Training, map.Method, map.Target), $"{where} has missing fields");
        Require(path, map.Rows >= 0 && map.Features >= 0 && map.Scores.LongLength == (long)map.Rows * map.Features * sizeof(float)
            && (map.Deltas is null || map.Deltas.LongLength == (long)map.Rows * sizeof(float))
            && (map.OutputGaps is null || map.OutputGaps.LongLength == (long)map.Rows * sizeof(float)),
            $"{where}: its scores do not fill {map.Rows} rows × {map.Features} features");
        Require(path, Half(map.HeldOut, map.Features) && Half(map.Training, map.Features), $"{where}: its per-half aggregates do not have {map.Features} features");
        if (run is not null)
        {
            Require(path, map.Features == run.Features.Count && map.Rows == run.HeldOutRows + run.TrainingRows,
                $"{where} is {map.Rows} × {map.Features} but run '{run.Name}' has {run.HeldOutRows + run.TrainingRows} probe rows and {run.Features.Count} features");
        }
        return map;
    }

    public static LayerMapDocument LayerMap(string path, LayerMapDocument map)
    {
        string where = $"the {map.Method} map of layer '{map.Layer}' at epoch {map.Epoch}";
        Require(path, Present(map.Scores, map.Outputs, map.Layer, map.Method, map.Target, map.Settings), $"{where} has missing fields");
        Require(path, map.Rows >= 0 && map.Units >= 0 && map.Scores.LongLength == (long)map.Rows * map.Units * sizeof(float)
            && map.Outputs.LongLength == (long)map.Rows * sizeof(float)
            && (map.Deltas is null || map.Deltas.LongLength == (long)map.Rows * sizeof(float))
            && (map.OutputGaps is null || map.OutputGaps.LongLength == (long)map.Rows * sizeof(float)),
            $"{where}: its scores do not fill {map.Rows} rows × {map.Units} units");
        return map;
    }

    public static EpochDocument Epoch(string path, EpochDocument epoch)
    {
        Require(path, Present(epoch.Metrics, epoch.Problems) && epoch.Problems.All(p => Present(p)), $"epoch {epoch.Epoch} has missing fields");
        return epoch;
    }

    public static VerdictDocument Verdict(string path, VerdictDocument verdict)
    {
        // A kind is kept by name: one this version does not know (a newer version wrote it) is shown as such, not
        // refused; only a name no version could write marks the document damaged.
        Require(path, Present(verdict.Reasons, verdict.Findings) && verdict.Reasons.All(r => Present(r)) && Known<VerdictKind>(verdict.Kind)
            && verdict.Findings.All(f => Present(f, f?.Epochs, f?.Feature, f?.Evidence) && FindingKind.IsName(f!.Kind) && f.Epochs.Length > 0 && Known<VerdictKind>(f.Severity)
                && (f.SeenOnlyBy is null || f.SeenOnlyBy.All(m => m is not null))),
            $"the verdict of epoch {verdict.Epoch} is damaged (an unreadable kind or a missing field)");
        return verdict;
    }

    // LiteDB fills properties from whatever the file holds, so a damaged document can carry nulls the types do not admit.
    private static bool Present(params object?[] values) => values.All(v => v is not null);

    private static bool Half(ImportanceDocument half, int features) =>
        Present(half, half?.MeanAbsolute, half?.MeanSigned, half?.Share)
        && half!.MeanAbsolute.Length == features && half.MeanSigned.Length == features && half.Share.Length == features
        && (half.Alignment is null || half.Alignment.Length == features);

    private static bool Known<T>(string? name)
        where T : struct, Enum =>
        name is not null && !int.TryParse(name, NumberStyles.Integer, CultureInfo.InvariantCulture, out _) && Enum.TryParse<T>(name, ignoreCase: false, out var value) && Enum.IsDefined(value);

    private static void Require(string path, bool holds, string what)
    {
        if (!holds)
            throw new StoreException($"store '{path}' is damaged: {what}; use an intact copy");
    }
}
