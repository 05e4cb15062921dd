using System.Globalization;
using System.Text;
using System.Text.Json;
using Parquet;
using Parquet.Schema;

namespace DriftWatch.Export;

/// <summary>The file formats of an export.</summary>
public enum ExportFormat
{
    /// <summary>
    /// Two RFC 4180 CSV files: the importance table at the path given, the epoch table beside it (<c>NAME-epochs.csv</c>).
    /// Made for spreadsheets: see <see cref="CsvText"/> for how names are written.
    /// </summary>
    Csv,

    /// <summary>One JSON document holding both tables (shape: <see cref="RunExport.JsonSchema"/>).</summary>
    Json,

    /// <summary>Two Apache Parquet files: the importance table at the path given, the epoch table beside it (<c>NAME-epochs.parquet</c>).</summary>
    Parquet,
}

/// <summary>The files an export wrote.</summary>
/// <param name="Importance">The importance table (or the one JSON file).</param>
/// <param name="Epochs">The epoch table; the same file as <paramref name="Importance"/> for JSON.</param>
/// <param name="ImportanceRows">Rows in the importance table.</param>
/// <param name="EpochRows">Rows in the epoch table.</param>
public sealed record ExportFiles(string Importance, string Epochs, int ImportanceRows, int EpochRows);

/// <summary>How the CSV export writes names (runs, methods, targets, features, metric columns).</summary>
public enum CsvText
{
    /// <summary>
    /// Safe to open in a spreadsheet (the default): a name starting with <c>=</c>, <c>+</c>, <c>-</c>, <c>@</c>, a tab or a
    /// carriage return gets a leading apostrophe, so it is shown as text rather than run as a formula, and control characters
    /// other than tab and line breaks (ESC, NUL, …) are left out. Numbers are never changed.
    /// </summary>
    FormulaSafe,

    /// <summary>Every name exactly as stored (only RFC 4180 quoting), for a program that reads the table back.</summary>
    Exact,
}

/// <summary>Writes a run's tables as CSV, JSON or Parquet, so pandas, R, DuckDB or Spark read them directly.</summary>
/// <remarks>Each file is written under a temporary name beside it and renamed into place (<see cref="OutputFile"/>).</remarks>
public static class RunExport
{
    /// <summary>The importance table's columns, in order.</summary>
    public static IReadOnlyList<string> ImportanceColumns { get; } =
        ["run", "epoch", "method", "target", "half", "feature", "importance", "share", "lower", "upper", "signed_mean", "alignment"];

    /// <summary>The JSON Schema (draft 2020-12) of the JSON export.</summary>
    public static string JsonSchema
    {
        get
        {
            using var stream = typeof(RunExport).Assembly.GetManifestResourceStream("DriftWatch.Export.export.schema.json")
                ?? throw new InvalidOperationException("the export's JSON schema is missing from the assembly");
            using var reader = new StreamReader(stream);
            return reader.ReadToEnd();
        }
    }

    /// <summary>Parses a format name: csv, json or parquet.</summary>
    /// <exception cref="DriftWatchException">Not one of them.</exception>
    public static ExportFormat ParseFormat(string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        return text.Trim().ToLowerInvariant() switch
        {
            "csv" => ExportFormat.Csv,
            "json" => ExportFormat.Json,
            "parquet" => ExportFormat.Parquet,
            _ => throw new DriftWatchException($"--format must be csv, json or parquet; got '{text}'"),
        };
    }

    /// <summary>The epoch table's path for an importance table at <paramref name="path"/>: <c>NAME-epochs.EXT</c> beside it.</summary>
    public static string EpochsPath(string path)
    {
        ArgumentNullException.ThrowIfNull(path);
        string folder = Path.GetDirectoryName(Path.GetFullPath(path)) ?? ".";
        return Path.Combine(folder, Path.GetFileNameWithoutExtension(path) + "-epochs" + Path.GetExtension(path));
    }

    /// <summary>Writes <paramref name="tables"/> in <paramref name="format"/> to <paramref name="path"/> (and the epoch table beside it), replacing files there.</summary>
    /// <param name="tables">The run's tables.</param>
    /// <param name="format">The file format.</param>
    /// <param name="path">The importance table's file (the one JSON file).</param>
    /// <param name="csvText">How CSV cells hold names; JSON and Parquet always hold them exactly. Default: <see cref="CsvText.FormulaSafe"/>.</param>
    /// <exception cref="DriftWatchException">A file cannot be written (no file is left half written).</exception>
    public static ExportFiles Write(RunTables tables, ExportFormat format, string path, CsvText csvText = CsvText.FormulaSafe)
    {
        ArgumentNullException.ThrowIfNull(tables);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        string full = Path.GetFullPath(path);
        if (Directory.Exists(full))
            throw new DriftWatchException($"--out '{full}' is a folder; pass a file name, e.g. {Path.Combine(full, "run." + format.ToString().ToLowerInvariant())}");
        string epochs = format == ExportFormat.Json ? full : EpochsPath(full);
        try
        {
            Directory.CreateDirectory(Path.GetDirectoryName(full)!);
            switch (format)
            {
                case ExportFormat.Csv:
                    WriteCsv(tables, full, epochs, csvText);
                    break;
                case ExportFormat.Json:
                    WriteJson(tables, full);
                    break;
                case ExportFormat.Parquet:
                    WriteParquetAsync(tables, full, epochs).GetAwaiter().GetResult();
                    break;
                default:
                    throw new ArgumentOutOfRangeException(nameof(format), format, "unknown export format");
            }
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new DriftWatchException($"cannot write the export to '{full}': {e.Message}", e);
        }
        return new ExportFiles(full, epochs, tables.Importance.Length, tables.Epochs.Length);
    }

    // RFC 4180: comma-separated, CRLF line ends, a field quoted when it holds a comma, a quote or a line break, quotes doubled.
    // Numbers in invariant culture, round-trip precision; a missing value is an empty field.
    private static void WriteCsv(RunTables tables, string importancePath, string epochsPath, CsvText csvText)
    {
        string Csv(string text) => CsvField(text, csvText);
        OutputFile.Write(importancePath, stream =>
        {
            using var writer = CsvWriter(stream);
            writer.WriteLine(string.Join(',', ImportanceColumns));
            foreach (var r in tables.Importance)
            {
                writer.WriteLine(string.Join(',',
                    Csv(r.Run), Integer(r.Epoch), Csv(r.Method), Csv(r.Target), Csv(r.Half), Csv(r.Feature),
                    Number(r.Importance), Number(r.Share), Number(r.Lower), Number(r.Upper), Number(r.SignedMean), Number(r.Alignment)));
            }
        });
        OutputFile.Write(epochsPath, stream =>
        {
            using var writer = CsvWriter(stream);
            writer.WriteLine(string.Join(',', new[] { "run", "epoch", "verdict", "findings" }.Concat(tables.MetricColumns.Select(Csv))));
            foreach (var e in tables.Epochs)
            {
                writer.WriteLine(string.Join(',',
                    new[] { Csv(e.Run), Integer(e.Epoch), e.Verdict is null ? "" : Csv(e.Verdict), Integer(e.Findings) }
                        .Concat(tables.MetricColumns.Select(c => Number(e.Values.GetValueOrDefault(c))))));
            }
        });
    }

    private static StreamWriter CsvWriter(Stream stream) => new(stream, new UTF8Encoding(false), leaveOpen: true) { NewLine = "\r\n" };

    /// <summary>One CSV field holding a name: quoted per RFC 4180 when needed and, when <see cref="CsvText.FormulaSafe"/>, safe in a spreadsheet.</summary>
    public static string CsvField(string text, CsvText csvText = CsvText.FormulaSafe)
    {
        ArgumentNullException.ThrowIfNull(text);
        if (csvText == CsvText.FormulaSafe)
        {
            // Spreadsheets run a cell starting with one of these as a formula (common practice: prefix an apostrophe).
            text = string.Concat(text.Where(c => !char.IsControl(c) || c is '\t' or '\n' or '\r'));
            if (text.Length > 0 && text[0] is '=' or '+' or '-' or '@' or '\t' or '\r')
                text = "'" + text;
        }
        return text.AsSpan().IndexOfAny(",\"\r\n") >= 0 ? "\"" + text.Replace("\"", "\"\"", StringComparison.Ordinal) + "\"" : text;
    }

    private static string Integer(int value) => value.ToString(CultureInfo.InvariantCulture);

    private static string Number(double? value) => value is double v ? v.ToString("R", CultureInfo.InvariantCulture) : "";

    // JSON has no NaN or infinity: such a value is written as null, like a missing one.
    private static void WriteJson(RunTables tables, string path)
    {
        OutputFile.Write(path, stream => WriteJson(tables, stream));
    }

    private static void WriteJson(RunTables tables, Stream stream)
    {
        using var json = new Utf8JsonWriter(stream, new JsonWriterOptions { Indented = false });
        json.WriteStartObject();
        json.WriteString("format", "driftwatch-export/1");
        json.WriteString("run", tables.Run);
        json.WriteStartArray("importance");
        foreach (var r in tables.Importance)
        {
            json.WriteStartObject();
            json.WriteString("run", r.Run);
            json.WriteNumber("epoch", r.Epoch);
            json.WriteString("method", r.Method);
            json.WriteString("target", r.Target);
            json.WriteString("half", r.Half);
            json.WriteString("feature", r.Feature);
            Write(json, "importance", r.Importance);
            Write(json, "share", r.Share);
            Write(json, "lower", r.Lower);
            Write(json, "upper", r.Upper);
            Write(json, "signed_mean", r.SignedMean);
            Write(json, "alignment", r.Alignment);
            json.WriteEndObject();
        }
        json.WriteEndArray();
        json.WriteStartArray("epochs");
        foreach (var e in tables.Epochs)
        {
            json.WriteStartObject();
            json.WriteString("run", e.Run);
            json.WriteNumber("epoch", e.Epoch);
            if (e.Verdict is null)
                json.WriteNull("verdict");
            else
                json.WriteString("verdict", e.Verdict);
            json.WriteNumber("findings", e.Findings);
            json.WriteStartObject("metrics");
            foreach (string column in tables.MetricColumns)
                Write(json, column, e.Values.GetValueOrDefault(column));
            json.WriteEndObject();
            json.WriteEndObject();
        }
        json.WriteEndArray();
        json.WriteEndObject();
    }

    private static void Write(Utf8JsonWriter json, string name, double? value)
    {
        if (value is double v && double.IsFinite(v))
            json.WriteNumber(name, v);
        else
            json.WriteNull(name);
    }

    private static async Task WriteParquetAsync(RunTables tables, string importancePath, string epochsPath)
    {
        var rows = tables.Importance;
        var run = new DataField<string>("run");
        var epoch = new DataField<int>("epoch");
        var method = new DataField<string>("method");
        var target = new DataField<string>("target");
        var half = new DataField<string>("half");
        var feature = new DataField<string>("feature");
        var importance = new DataField<double>("importance");
        var share = new DataField<double>("share");
        var lower = new DataField<double?>("lower");
        var upper = new DataField<double?>("upper");
        var signed = new DataField<double>("signed_mean");
        var alignment = new DataField<double?>("alignment");
        await OutputFile.WriteAsync(importancePath, async file =>
        {
            await using var writer = await ParquetWriter.CreateAsync(new ParquetSchema(run, epoch, method, target, half, feature, importance, share, lower, upper, signed, alignment), file).ConfigureAwait(false);
            using var group = writer.CreateRowGroup();
            await group.WriteAsync(run, [.. rows.Select(r => r.Run)]).ConfigureAwait(false);
            await group.WriteAsync<int>(epoch, rows.Select(r => r.Epoch).ToArray().AsMemory()).ConfigureAwait(false);
            await group.WriteAsync(method, [.. rows.Select(r => r.Method)]).ConfigureAwait(false);
            await group.WriteAsync(target, [.. rows.Select(r => r.Target)]).ConfigureAwait(false);
            await group.WriteAsync(half, [.. rows.Select(r => r.Half)]).ConfigureAwait(false);
            await group.WriteAsync(feature, [.. rows.Select(r => r.Feature)]).ConfigureAwait(false);
            await group.WriteAsync<double>(importance, rows.Select(r => r.Importance).ToArray().AsMemory()).ConfigureAwait(false);
            await group.WriteAsync<double>(share, rows.Select(r => r.Share).ToArray().AsMemory()).ConfigureAwait(false);
            await group.WriteAsync<double>(lower, rows.Select(r => r.Lower).ToArray().AsMemory()).ConfigureAwait(false);
            await group.WriteAsync<double>(upper, rows.Select(r => r.Upper).ToArray().AsMemory()).ConfigureAwait(false);
            await group.WriteAsync<double>(signed, rows.Select(r => r.SignedMean).ToArray().AsMemory()).ConfigureAwait(false);
            await group.WriteAsync<double>(alignment, rows.Select(r => r.Alignment).ToArray().AsMemory()).ConfigureAwait(false);
        }).ConfigureAwait(false);

        var epochs = tables.Epochs;
        var epochRun = new DataField<string>("run");
        var epochNumber = new DataField<int>("epoch");
        var verdict = new DataField<string>("verdict", nullable: true);
        var findings = new DataField<int>("findings");
        var metrics = tables.MetricColumns.Select(c => new DataField<double?>(c)).ToArray();
        await OutputFile.WriteAsync(epochsPath, async file =>
        {
            var fields = new List<Field> { epochRun, epochNumber, verdict, findings };
            fields.AddRange(metrics);
            await using var writer = await ParquetWriter.CreateAsync(new ParquetSchema(fields), file).ConfigureAwait(false);
            using var group = writer.CreateRowGroup();
            await group.WriteAsync(epochRun, [.. epochs.Select(e => e.Run)]).ConfigureAwait(false);
            await group.WriteAsync<int>(epochNumber, epochs.Select(e => e.Epoch).ToArray().AsMemory()).ConfigureAwait(false);
            await group.WriteAsync(verdict, [.. epochs.Select(e => e.Verdict)]).ConfigureAwait(false);
            await group.WriteAsync<int>(findings, epochs.Select(e => e.Findings).ToArray().AsMemory()).ConfigureAwait(false);
            for (int c = 0; c < metrics.Length; c++)
            {
                string column = tables.MetricColumns[c];
                await group.WriteAsync<double>(metrics[c], epochs.Select(e => e.Values.GetValueOrDefault(column)).ToArray().AsMemory()).ConfigureAwait(false);
            }
        }).ConfigureAwait(false);
    }
}
