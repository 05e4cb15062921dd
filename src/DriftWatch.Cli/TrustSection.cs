using System.Globalization;
using DriftWatch.Charts;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary>The part of <c>show</c> that says how far to trust each epoch's maps: agreement with the other methods and quality figures.</summary>
internal static class TrustSection
{
    /// <summary>Writes the section for <paramref name="method"/>'s maps.</summary>
    /// <param name="output">Where to write.</param>
    /// <param name="method">The method shown.</param>
    /// <param name="quality">The method's stored agreement and quality documents, in epoch order.</param>
    /// <param name="reattributed">The run's re-attributed map names (not configured methods).</param>
    public static void Write(TextWriter output, string method, IReadOnlyList<MapQualityDocument> quality, IReadOnlyList<string> reattributed)
    {
        string name = DisplayText.Clean(method);
        if (reattributed.Count > 0)
            output.WriteLine($"Re-attributed maps of this run (show them with --method NAME): {DisplayText.Clean(string.Join(", ", reattributed))}");
        if (quality.Count == 0)
        {
            output.WriteLine($"No method agreement or quality figures stored for {name}: configure several methods or MonitorOptions.Quality, or use 'driftwatch reattribute'.");
            return;
        }
        bool measured = quality.Any(q => q.Measured);
        output.WriteLine($"Trust in the {name} maps: rank agreement is Spearman's ρ between this method's held-out importance and each other method's (1 = same order)"
            + (measured ? "; quality figures after Yeh et al. 2019 on a subsample of probe rows, both relative (0 is best)." : "."));
        var table = new TextTable(">epoch", "rank agreement (ρ)", ">infidelity", ">max-sensitivity", ">rows");
        foreach (var q in quality)
        {
            string agreement = q.Agreement.Count == 0
                ? "-"
                : string.Join(", ", q.Agreement.OrderBy(a => a.Method, StringComparer.Ordinal).Select(a => $"{a.Method} {Detection.MethodAgreement.Format(a.Spearman)}"));
            table.Add(
                Formats.Integer(q.Epoch),
                agreement,
                q.Measured ? Figure(q.RelativeInfidelity) : "-",
                q.Measured ? Figure(q.RelativeMaxSensitivity) : "-",
                q.Measured ? Formats.Integer(q.QualityRows) : "-");
        }
        table.Write(output);
        if (measured)
        {
            output.WriteLine("  infidelity: squared error of the output change the map predicts when random feature subsets are set to the baseline, over the squared change itself (1 = no better than predicting no change).");
            output.WriteLine("  max-sensitivity: the largest change of a row's feature scores when its inputs move a little (2% of each column's range), over the scores' own size.");
        }
    }

    private static string Figure(double value) =>
        double.IsFinite(value) ? value.ToString("0.000", CultureInfo.InvariantCulture) : "n/a";
}
