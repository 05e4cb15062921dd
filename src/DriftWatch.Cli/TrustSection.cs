using System.Globalization;
using DriftWatch.Charts;
using DriftWatch.Charts.Report;
using DriftWatch.Detection;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary>The part of <c>show</c> that says how far to trust each epoch's maps: agreement with the other methods and quality figures.</summary>
internal static class TrustSection
{
    /// <summary>Writes the section for <paramref name="method"/>'s maps.</summary>
    /// <param name="output">Where to write.</param>
    /// <param name="method">The method shown.</param>
    /// <param name="maps">Every map of the run (all methods), for the rank agreement.</param>
    /// <param name="quality">The shown method's stored quality documents.</param>
    /// <param name="reattributed">The run's re-attributed map names (not configured methods).</param>
    /// <param name="trust">Every method's trust documents, for the summary of all methods' quality figures.</param>
    public static void Write(TextWriter output, string method, IReadOnlyList<MapDocument> maps, IReadOnlyList<MapQualityDocument> quality, IReadOnlyList<string> reattributed, IReadOnlyList<MapTrust> trust)
    {
        WriteMethod(output, method, maps, quality, reattributed);
        var measured = RunTrust.Summarise(trust).Where(s => s.MeasuredEpochs > 0).ToList();
        if (measured.Count == 0 || (measured.Count == 1 && measured[0].Method == method))
            return;
        output.WriteLine("Quality figures of every method (relative; median over measured epochs, last in brackets; 0 is best):");
        var table = new TextTable("method", ">epochs measured", ">infidelity", ">max-sensitivity");
        foreach (var s in measured)
            table.Add(DisplayText.Clean(s.Method), Formats.Integer(s.MeasuredEpochs), $"{Figure(s.MedianInfidelity)} ({Figure(s.LastInfidelity)})", $"{Figure(s.MedianSensitivity)} ({Figure(s.LastSensitivity)})");
        table.Write(output);
    }

    private static void WriteMethod(TextWriter output, string method, IReadOnlyList<MapDocument> maps, IReadOnlyList<MapQualityDocument> quality, IReadOnlyList<string> reattributed)
    {
        string name = DisplayText.Clean(method);
        if (reattributed.Count > 0)
            output.WriteLine($"Re-attributed maps of this run (show them with --method NAME): {DisplayText.Clean(string.Join(", ", reattributed))}");

        // Agreement is recomputed from every stored map's held-out importance (the same ρ the monitor stores), so maps
        // re-attributed later are compared too.
        var byEpoch = maps.GroupBy(m => m.Epoch).ToDictionary(g => g.Key, g => g.ToList());
        var others = maps.Where(m => m.Method != method).Select(m => m.Method).Distinct().Order(StringComparer.Ordinal).ToList();
        var figures = quality.Where(q => q.Measured).ToDictionary(q => q.Epoch);
        var epochs = maps.Where(m => m.Method == method).Select(m => m.Epoch).Distinct().Order().ToList();
        if (others.Count == 0 && figures.Count == 0)
        {
            output.WriteLine($"No other method's maps and no quality figures for {name}: configure several methods or MonitorOptions.Quality, or use 'driftwatch reattribute'.");
            return;
        }

        output.WriteLine($"Trust in the {name} maps: rank agreement (ρ) is Spearman's correlation of held-out importance with each other method's (1 = same order)"
            + (figures.Count > 0 ? "; quality figures after Yeh et al. 2019 on a subsample of probe rows, relative (0 is best)." : "."));
        var headers = new List<string> { ">epoch" };
        headers.AddRange(others.Select(o => ">ρ " + o));
        if (figures.Count > 0)
            headers.AddRange([">infidelity", ">max-sensitivity"]);
        var table = new TextTable([.. headers]);
        foreach (int epoch in epochs)
        {
            var here = byEpoch[epoch];
            var own = here.First(m => m.Method == method);
            var cells = new List<string> { Formats.Integer(epoch) };
            foreach (string other in others)
            {
                var map = here.FirstOrDefault(m => m.Method == other && m.Target == own.Target);
                cells.Add(map is null || map.HeldOut.MeanAbsolute.Length != own.HeldOut.MeanAbsolute.Length
                    ? "-"
                    : MethodAgreement.Format(MethodAgreement.Spearman(own.HeldOut.MeanAbsolute, map.HeldOut.MeanAbsolute)));
            }
            if (figures.Count > 0)
            {
                var q = figures.GetValueOrDefault(epoch);
                cells.Add(q is null ? "-" : Figure(q.RelativeInfidelity));
                cells.Add(q is null ? "-" : Figure(q.RelativeMaxSensitivity));
            }
            table.Add([.. cells]);
        }
        table.Write(output);
        if (figures.Count > 0)
        {
            int rows = figures.Values.Max(q => q.QualityRows);
            output.WriteLine($"  infidelity: squared error of the output change the map predicts when random feature subsets are set to the baseline, over the squared change itself (1 = no better than predicting no change); {Formats.Integer(rows)} probe rows.");
            output.WriteLine("  (Plain-gradient maps — saliency, smoothgrad — are per unit of input, not output changes, so their infidelity is high by construction.)");
            output.WriteLine("  max-sensitivity: the largest change of a row's feature scores when its inputs move a little (2% of each column's range by default), over the scores' own size.");
        }
    }

    private static string Figure(double value) =>
        double.IsFinite(value) ? value.ToString("0.000", CultureInfo.InvariantCulture) : "n/a";
}
