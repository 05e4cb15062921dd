using System.CommandLine;
using System.Globalization;
using System.Text.Json;
using DriftWatch.Charts;
using DriftWatch.Charts.Compare;
using DriftWatch.Charts.Report;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch compare RUN-A RUN-B</c>: two runs side by side, from one store or two.</summary>
internal static class CompareCommand
{
    /// <summary>The folder the comparison chart goes to when <c>--out</c> is not given.</summary>
    public const string DefaultFolder = "driftwatch-charts";

    /// <summary>Builds the command.</summary>
    public static Command Create(Option<string> store)
    {
        var runA = new Argument<string>("run-a") { Description = "The first run (A), from --store." };
        var runB = new Argument<string>("run-b") { Description = "The second run (B), from --store-b if given, else from --store." };
        var storeB = new Option<string?>("--store-b")
        {
            Description = "The store file of run B, when it is not in --store.",
            HelpName = "PATH",
        };
        var method = CommonOptions.Method();
        var top = CommonOptions.Bounded("--top", $"Features shown side by side and in the chart: the top ones by held-out share at the last matching epoch in either run (1 to {TrendChart.MaximumTopFeatures}).", ComparisonChart.DefaultTopFeatures, 1, TrendChart.MaximumTopFeatures);
        var width = CommonOptions.Width();
        var height = CommonOptions.Height();
        var output = CommonOptions.OutputFolder(DefaultFolder, "The folder to write the comparison chart to; created when missing.");
        var noChart = new Option<bool>("--no-chart") { Description = "Print the comparison only; write no chart." };
        var json = CommonOptions.Json("the comparison (every matching epoch's shares and correlations, the findings only one run has)");
        var command = new Command(
            "compare",
            "Compare two runs: at every epoch both attributed, the Spearman rank correlation between their held-out shares (and training shares) "
            + "over the features both have; the top features' shares side by side at the last matching epoch; the findings only one run raised; "
            + "and a comparison chart. A run compared with itself gives ρ = 1 at every epoch.\n"
            + "Examples:\n"
            + "  driftwatch compare night-7 night-8\n"
            + "  driftwatch compare night-7 night-7 --store old.litedb --store-b new.litedb --json\n"
            + ExitCodes.ReadingCommandsHelp)
        {
            runA,
            runB,
            storeB,
            method,
            top,
            width,
            height,
            output,
            noChart,
            json,
        };
        command.SetAction(parse =>
        {
            string methodName = parse.GetValue(method)!;
            RunHistory a;
            RunHistory b;
            using (var first = CommonOptions.OpenStore(parse, store))
            {
                a = RunHistory.Load(first, parse.GetValue(runA)!, methodName);
                if (parse.GetValue(storeB) is { } otherPath)
                {
                    if (string.IsNullOrWhiteSpace(otherPath))
                        throw new DriftWatchException("--store-b must name a store file; got an empty path");
                    using var second = Storage.RunStore.OpenForReading(otherPath);
                    b = RunHistory.Load(second, parse.GetValue(runB)!, methodName);
                }
                else
                {
                    b = RunHistory.Load(first, parse.GetValue(runB)!, methodName);
                }
            }
            var comparison = RunComparison.Of(a, b);
            string? chartPath = null;
            if (!parse.GetValue(noChart) && !comparison.Epochs.IsEmpty && !comparison.Features.IsEmpty)
            {
                string folder = CommonOptions.Folder(parse.GetValue(output)!);
                chartPath = Path.Combine(folder, ComparisonChart.FileName(comparison));
                try
                {
                    Directory.CreateDirectory(folder);
                    new ComparisonChart(parse.GetValue(top)).Render(comparison, chartPath, new ChartSize(parse.GetValue(width), parse.GetValue(height)));
                }
                catch (Exception e) when (e is IOException or UnauthorizedAccessException)
                {
                    throw new DriftWatchException($"cannot write the chart to '{DisplayText.Clean(chartPath)}': {e.Message}", e);
                }
            }
            var writer = parse.InvocationConfiguration.Output;
            if (parse.GetValue(json))
                WriteJson(writer, comparison, chartPath);
            else
                WriteText(writer, comparison, parse.GetValue(top), chartPath);
            return ExitCodes.Fine;
        });
        return command;
    }

    private static void WriteText(TextWriter output, RunComparison c, int top, string? chartPath)
    {
        output.WriteLine($"A  {DisplayText.Clean(c.A.RunName)}  ({Formats.Integer(c.A.Epochs.Length)} epochs, {Formats.Integer(c.A.FeatureNames.Length)} features)");
        output.WriteLine($"B  {DisplayText.Clean(c.B.RunName)}  ({Formats.Integer(c.B.Epochs.Length)} epochs, {Formats.Integer(c.B.FeatureNames.Length)} features)");
        output.WriteLine($"{Formats.Integer(c.Features.Length)} features in common; {Formats.Integer(c.Epochs.Length)} epochs attributed in both ({DisplayText.Clean(c.A.Method)})");
        if (!c.FeaturesOnlyInA.IsEmpty)
            output.WriteLine($"features only in A: {DisplayText.Clean(string.Join(", ", c.FeaturesOnlyInA), 300)}");
        if (!c.FeaturesOnlyInB.IsEmpty)
            output.WriteLine($"features only in B: {DisplayText.Clean(string.Join(", ", c.FeaturesOnlyInB), 300)}");
        output.WriteLine();
        if (c.Epochs.IsEmpty)
        {
            output.WriteLine("No epoch was attributed in both runs; nothing to correlate.");
        }
        else
        {
            var table = new TextTable(">epoch", ">rank correlation, held-out", ">rank correlation, training");
            foreach (var e in c.Epochs)
                table.Add(Formats.Integer(e.Epoch), Rho(e.HeldOutSpearman), Rho(e.TrainingSpearman));
            table.Write(output);
            output.WriteLine();
            var last = c.Epochs[^1];
            output.WriteLine($"Held-out shares side by side at epoch {Formats.Integer(last.Epoch)}:");
            var shares = new TextTable("feature", ">A", ">B", ">B minus A (points)");
            foreach (int f in c.TopFeatures(top))
                shares.Add(DisplayText.Clean(c.Features[f], 40), Formats.Percent(last.SharesA[f]), Formats.Percent(last.SharesB[f]), Formats.Points(last.SharesB[f] - last.SharesA[f]));
            shares.Write(output);
        }
        output.WriteLine();
        WriteFindings(output, "Findings only A raised", c.OnlyInA);
        WriteFindings(output, "Findings only B raised", c.OnlyInB);
        if (chartPath is not null)
        {
            output.WriteLine();
            output.WriteLine($"chart  {chartPath}");
        }
    }

    private static void WriteFindings(TextWriter output, string title, IReadOnlyList<FindingSummary> findings)
    {
        if (findings.Count == 0)
        {
            output.WriteLine($"{title}: none");
            return;
        }
        output.WriteLine($"{title}:");
        foreach (var f in findings)
            output.WriteLine($"  {f.Severity,-8} {RunFindings.Describe(f.Kind)}{(f.Feature.Length > 0 ? " '" + DisplayText.Clean(f.Feature, 60) + "'" : "")} at epochs {ReportText.Ranges(f.FlaggedEpochs)}");
    }

    private static string Rho(double value) => double.IsFinite(value) ? value.ToString("0.000", CultureInfo.InvariantCulture) : "-";

    private static void WriteJson(TextWriter output, RunComparison c, string? chartPath)
    {
        static object? Number(double value) => double.IsFinite(value) ? value : null;
        static object Finding(FindingSummary f) => new Dictionary<string, object?>
        {
            ["kind"] = f.Kind.ToString(),
            ["feature"] = f.Feature,
            ["severity"] = f.Severity.ToString(),
            ["epochs"] = f.FlaggedEpochs.ToArray(),
            ["evidence"] = f.Evidence,
        };
        var document = new Dictionary<string, object?>
        {
            ["runA"] = c.A.RunName,
            ["runB"] = c.B.RunName,
            ["method"] = c.A.Method,
            ["features"] = c.Features.ToArray(),
            ["featuresOnlyInA"] = c.FeaturesOnlyInA.ToArray(),
            ["featuresOnlyInB"] = c.FeaturesOnlyInB.ToArray(),
            ["epochs"] = c.Epochs.Select(e => new Dictionary<string, object?>
            {
                ["epoch"] = e.Epoch,
                ["heldOutSpearman"] = Number(e.HeldOutSpearman),
                ["trainingSpearman"] = Number(e.TrainingSpearman),
                ["sharesA"] = e.SharesA.Select(Number).ToArray(),
                ["sharesB"] = e.SharesB.Select(Number).ToArray(),
            }).ToList(),
            ["onlyInA"] = c.OnlyInA.Select(Finding).ToList(),
            ["onlyInB"] = c.OnlyInB.Select(Finding).ToList(),
            ["chart"] = chartPath,
        };
        output.WriteLine(JsonSerializer.Serialize(document, JsonText.Options));
    }
}
