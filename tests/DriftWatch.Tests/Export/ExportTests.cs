using System.Globalization;
using System.Text.Json;
using CsvHelper;
using DriftWatch.Export;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Json.Schema;
using Xunit;

namespace DriftWatch.Tests.Export;

public sealed class ExportTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public ExportTests(DemoStoreFixture fixture) => _fixture = fixture;

    // What the store holds, read straight from its documents: (epoch, method, half, feature) → (importance, share, signed mean, width or null).
    private static Dictionary<(int, string, string, string), (double Importance, double Share, double Signed, double? Width)> Stored(string storePath, string runName)
    {
        using var store = RunStore.OpenForReading(storePath);
        var run = store.GetRun(runName);
        var statistics = store.StatisticsOf(run.Id).ToDictionary(s => s.Epoch, s => s.Statistics!);
        var stored = new Dictionary<(int, string, string, string), (double, double, double, double?)>();
        foreach (var map in store.Maps(run.Id))
        {
            bool primary = map.Method == run.Methods[0].Name && statistics.ContainsKey(map.Epoch);
            for (int f = 0; f < run.Features.Count; f++)
            {
                string name = run.Features[f].Name;
                stored[(map.Epoch, map.Method, "held-out", name)] = (map.HeldOut.MeanAbsolute[f], map.HeldOut.Share[f], map.HeldOut.MeanSigned[f], primary ? statistics[map.Epoch].ShareHeldOutWidth[f] : null);
                stored[(map.Epoch, map.Method, "training", name)] = (map.Training.MeanAbsolute[f], map.Training.Share[f], map.Training.MeanSigned[f], primary ? statistics[map.Epoch].ShareTrainingWidth[f] : null);
            }
        }
        return stored;
    }

    private static RunTables Tables(string storePath, string run)
    {
        using var store = RunStore.OpenForReading(storePath);
        return RunTables.Read(store, run);
    }

    [Fact]
    public void CsvReadBackByCsvHelperEqualsTheStoresValues()
    {
        string path = Path.Combine(_fixture.Folder, "export", "leak.csv");
        var files = RunExport.Write(Tables(_fixture.StorePath, DemoStoreFixture.LeakRun), ExportFormat.Csv, path);
        var stored = Stored(_fixture.StorePath, DemoStoreFixture.LeakRun);

        // CsvHelper, a general-purpose RFC 4180 reader, reads what pandas or R would.
        var (header, rows) = ReadCsv(files.Importance);
        Assert.Equal(RunExport.ImportanceColumns, header);
        Assert.Equal(stored.Count, rows.Count);
        foreach (var row in rows)
        {
            var key = (int.Parse(row["epoch"], CultureInfo.InvariantCulture), row["method"], row["half"], row["feature"]);
            var (importance, share, signed, width) = stored[key];
            Assert.Equal(DemoStoreFixture.LeakRun, row["run"]);
            Assert.Equal(importance, Parse(row["importance"]));
            Assert.Equal(share, Parse(row["share"]));
            Assert.Equal(signed, Parse(row["signed_mean"]));
            Assert.Equal(width is double w ? share - w / 2 : null, ParseOrNull(row["lower"]));
            Assert.Equal(width is double w2 ? share + w2 / 2 : null, ParseOrNull(row["upper"]));
        }

        var (_, epochs) = ReadCsv(files.Epochs);
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var run = store.GetRun(DemoStoreFixture.LeakRun);
        var documents = store.Epochs(run.Id);
        var verdicts = store.Verdicts(run.Id);
        Assert.Equal(documents.Count, epochs.Count);
        for (int i = 0; i < documents.Count; i++)
        {
            Assert.Equal(documents[i].Epoch.ToString(CultureInfo.InvariantCulture), epochs[i]["epoch"]);
            Assert.Equal(documents[i].Metrics[MetricKeys.TrainLoss], Parse(epochs[i][MetricKeys.TrainLoss]));
            Assert.Equal(documents[i].Metrics[MetricKeys.ValidationLoss], Parse(epochs[i][MetricKeys.ValidationLoss]));
            Assert.Equal(verdicts[i].Kind, epochs[i]["verdict"]);
        }
    }

    [Fact]
    public void ParquetWrittenByParquetNetAndReadByApacheArrowsReaderEqualsTheStoresValues()
    {
        string path = Path.Combine(_fixture.Folder, "export", "leak.parquet");
        var tables = Tables(_fixture.StorePath, DemoStoreFixture.LeakRun);
        var files = RunExport.Write(tables, ExportFormat.Parquet, path);
        var stored = Stored(_fixture.StorePath, DemoStoreFixture.LeakRun);

        // ParquetSharp wraps Apache Arrow's C++ Parquet reader: an implementation independent of the writer.
        using var file = new ParquetSharp.ParquetFileReader(files.Importance);
        Assert.Equal(RunExport.ImportanceColumns, Enumerable.Range(0, file.FileMetaData.NumColumns).Select(c => file.FileMetaData.Schema.Column(c).Name));
        int count = checked((int)file.FileMetaData.NumRows);
        Assert.Equal(stored.Count, count);
        var read = new List<(int Epoch, string Method, string Half, string Feature, double Importance, double Share, double? Lower, double Signed)>();
        for (int g = 0; g < file.FileMetaData.NumRowGroups; g++)
        {
            using var group = file.RowGroup(g);
            int n = checked((int)group.MetaData.NumRows);
            var epoch = group.Column(1).LogicalReader<int>().ReadAll(n);
            var method = group.Column(2).LogicalReader<string>().ReadAll(n);
            var half = group.Column(4).LogicalReader<string>().ReadAll(n);
            var feature = group.Column(5).LogicalReader<string>().ReadAll(n);
            var importance = group.Column(6).LogicalReader<double>().ReadAll(n);
            var share = group.Column(7).LogicalReader<double>().ReadAll(n);
            var lower = group.Column(8).LogicalReader<double?>().ReadAll(n);
            var signed = group.Column(10).LogicalReader<double>().ReadAll(n);
            for (int i = 0; i < n; i++)
                read.Add((epoch[i], method[i], half[i], feature[i], importance[i], share[i], lower[i], signed[i]));
        }
        foreach (var r in read)
        {
            var (importance, share, signed, width) = stored[(r.Epoch, r.Method, r.Half, r.Feature)];
            Assert.Equal(importance, r.Importance);
            Assert.Equal(share, r.Share);
            Assert.Equal(signed, r.Signed);
            Assert.Equal(width is double w ? share - w / 2 : null, r.Lower);
        }

        using var epochs = new ParquetSharp.ParquetFileReader(files.Epochs);
        using var epochGroup = epochs.RowGroup(0);
        int rows = checked((int)epochGroup.MetaData.NumRows);
        Assert.Equal(tables.Epochs.Length, rows);
        int trainLoss = Enumerable.Range(0, epochs.FileMetaData.NumColumns).Single(c => epochs.FileMetaData.Schema.Column(c).Name == MetricKeys.TrainLoss);
        var losses = epochGroup.Column(trainLoss).LogicalReader<double?>().ReadAll(rows);
        Assert.Equal(tables.Epochs.Select(e => e.Values[MetricKeys.TrainLoss]), losses);
        var verdicts = epochGroup.Column(2).LogicalReader<string?>().ReadAll(rows);
        Assert.Equal(tables.Epochs.Select(e => e.Verdict), verdicts);
    }

    // The schema's definition of one table's file, as a schema of its own (each $defs entry is self-contained).
    internal static JsonSchema TableSchema(string table)
    {
        using var document = JsonDocument.Parse(RunExport.JsonSchema);
        return JsonSchema.FromText(document.RootElement.GetProperty("$defs").GetProperty(table).GetRawText());
    }

    private static void AssertValid(JsonSchema schema, JsonElement element)
    {
        var result = schema.Evaluate(element, new EvaluationOptions { OutputFormat = OutputFormat.List });
        Assert.True(result.IsValid, string.Join("; ", (result.Details ?? []).Where(d => d.Errors is not null).SelectMany(d => d.Errors!.Select(e => $"{d.InstanceLocation}: {e.Value}"))));
    }

    [Fact]
    public void JsonValidatesAgainstTheDocumentedSchemaAndHoldsTheStoresValues()
    {
        string path = Path.Combine(_fixture.Folder, "export", "leak.json");
        var tables = Tables(_fixture.StorePath, DemoStoreFixture.LeakRun);
        var files = RunExport.Write(tables, ExportFormat.Json, path);
        using var importance = JsonDocument.Parse(File.ReadAllText(files.Importance));
        using var epochs = JsonDocument.Parse(File.ReadAllText(files.Epochs));
        using var findings = JsonDocument.Parse(File.ReadAllText(files.Findings));

        // JsonSchema.Net, a JSON Schema 2020-12 validator, checks each file against the schema the docs name.
        AssertValid(TableSchema("importance"), importance.RootElement);
        AssertValid(TableSchema("epochs"), epochs.RootElement);
        AssertValid(TableSchema("findings"), findings.RootElement);
        AssertValid(JsonSchema.FromText(RunExport.JsonSchema), findings.RootElement);

        var stored = Stored(_fixture.StorePath, DemoStoreFixture.LeakRun);
        var rows = importance.RootElement.EnumerateArray().ToList();
        Assert.Equal(stored.Count, rows.Count);
        foreach (var row in rows)
        {
            var key = (row.GetProperty("epoch").GetInt32(), row.GetProperty("method").GetString()!, row.GetProperty("half").GetString()!, row.GetProperty("feature").GetString()!);
            Assert.Equal(stored[key].Share, row.GetProperty("share").GetDouble());
        }
        // Flat records: an epoch's metrics are columns of its row, as in the CSV.
        var first = epochs.RootElement[0];
        Assert.Equal(tables.Epochs[0].Values[MetricKeys.TrainLoss], first.GetProperty(MetricKeys.TrainLoss).GetDouble());
        Assert.Equal(tables.Findings.Length, findings.RootElement.GetArrayLength());
    }

    [Fact]
    public void TheNoiseFloorsTheRulesReadAreExportedAsTheDetectorStoredThem()
    {
        var tables = Tables(_fixture.StorePath, DemoStoreFixture.LeakRun);
        using var store = RunStore.OpenForReading(_fixture.StorePath);
        var run = store.GetRun(DemoStoreFixture.LeakRun);
        var statistics = store.StatisticsOf(run.Id).Where(s => s.Statistics is { Trusted: true }).ToDictionary(s => s.Epoch, s => s.Statistics!);
        var features = run.Features.Select(f => f.Name).ToList();
        string primary = run.Methods[0].Name;

        Assert.NotEmpty(statistics);
        foreach (var row in tables.Importance.Where(r => r.Method == primary && statistics.ContainsKey(r.Epoch)))
        {
            var s = statistics[row.Epoch];
            int f = features.IndexOf(row.Feature);
            Assert.Equal(s.ShareGap[f], row.ShareGap);
            Assert.Equal(s.ShareGapWidth[f], row.ShareGapWidth);
            Assert.Equal(s.AlignmentGap[f], row.AlignmentGap);
            Assert.Equal(s.AlignmentGapWidth[f], row.AlignmentGapWidth);
            Assert.Equal(row.Half == "held-out" ? s.ShareHeldOutWidth[f] : s.ShareTrainingWidth[f], row.ShareWidth);
        }
        foreach (var epoch in tables.Epochs.Where(e => statistics.ContainsKey(e.Epoch)))
        {
            Assert.Equal(statistics[epoch.Epoch].LeadWidthHeldOut, epoch.Values["lead_width_held_out"]);
            Assert.Equal(statistics[epoch.Epoch].LeadWidthTraining, epoch.Values["lead_width_training"]);
        }
        // The leak run's leak is flagged on its share gap or its alignment gap: the row says which, and the statistic and
        // bound are that gap and its noise floor as stored (so a reader can check "gap > widths × floor" from the table).
        var leak = tables.Findings.First(r => r.Kind == "Leak");
        var at = statistics[leak.ToEpoch];
        int leaked = features.IndexOf(leak.Feature);
        var (gap, width) = leak.Measure == "share_gap" ? (at.ShareGap[leaked], at.ShareGapWidth[leaked]) : (at.AlignmentGap[leaked], at.AlignmentGapWidth[leaked]);
        Assert.Contains(leak.Measure, new[] { "share_gap", "alignment_gap" });
        Assert.Equal(gap, leak.Statistic);
        Assert.Equal(width, leak.Bound);
        Assert.Equal("noise_floor", leak.BoundKind);
    }

    [Fact]
    public void TheSchemaRefusesADocumentOfAnotherShape()
    {
        var schema = JsonSchema.FromText(RunExport.JsonSchema);
        using var wrong = JsonDocument.Parse("""[ { "run": "r", "epoch": 1 } ]""");
        using var nested = JsonDocument.Parse("""{ "format": "driftwatch-export/1", "run": "r", "importance": [], "epochs": [] }""");

        Assert.False(schema.Evaluate(wrong.RootElement).IsValid);
        Assert.False(schema.Evaluate(nested.RootElement).IsValid);
    }

    [Fact]
    public void NamesWithCommasQuotesAndLineBreaksSurviveTheCsvRoundTrip()
    {
        using var folder = new TempFolder();
        string storePath = folder.File("names.litedb");
        string[] names = ["a,b", "say \"hi\"", "two\nlines", "=SUM(A1)", "<script>"];
        new StoreBuilder().WithRun("run, \"quoted\"").WithFeatures(names).WithEpochs(2).Build(storePath);
        var files = RunExport.Write(Tables(storePath, "run, \"quoted\""), ExportFormat.Csv, folder.File("names.csv"), CsvText.Exact);

        var (_, rows) = ReadCsv(files.Importance);
        Assert.Equal(2 * 2 * names.Length, rows.Count);
        Assert.All(rows, r => Assert.Equal("run, \"quoted\"", r["run"]));
        Assert.Equal(names, rows.Take(names.Length).Select(r => r["feature"]));
    }

    [Fact]
    public void ARunWithoutStatisticsHasEmptyBoundsNotMadeUpOnes()
    {
        using var folder = new TempFolder();
        string storePath = folder.File("plain.litedb");
        new StoreBuilder().WithoutStatistics().WithEpochs(2).Build(storePath);
        var tables = Tables(storePath, "built-run");

        Assert.All(tables.Importance, r => Assert.Null(r.Lower));
        Assert.All(tables.Importance, r => Assert.Null(r.Upper));
        Assert.All(tables.Epochs, e => Assert.Null(e.Values["drift_score"]));
        Assert.Contains("metric_accuracy", tables.MetricColumns);
    }

    // CsvHelper, a general-purpose RFC 4180 reader, reads the file as pandas or R would.
    private static (IReadOnlyList<string> Header, List<Dictionary<string, string>> Rows) ReadCsv(string path)
    {
        using var reader = CsvReader.FromFile(path, new CsvReaderOptions { HasHeader = true, AllowLineBreaksInQuotes = true });
        var rows = new List<Dictionary<string, string>>();
        IReadOnlyList<string>? header = null;
        while (reader.Read())
        {
            header ??= [.. reader.Headers];
            rows.Add(header.Select((h, i) => (h, reader.GetString(i))).ToDictionary(p => p.h, p => p.Item2));
        }
        return (header ?? [], rows);
    }

    private static double Parse(string text) => double.Parse(text, CultureInfo.InvariantCulture);

    private static double? ParseOrNull(string text) => text == "" ? null : Parse(text);
}
