using System.Globalization;
using System.Text;
using System.Text.Encodings.Web;
using System.Text.Json;
using Parquet;
using Parquet.Schema;

namespace DriftWatch.Export;

/// <summary>The file formats of an export. Every format writes three tables: importance at the path given, epochs and findings beside it.</summary>
public enum ExportFormat
{
    /// <summary>
    /// Three RFC 4180 CSV files: the importance table at the path given, the epoch table (<c>NAME-epochs.csv</c>) and the
    /// findings table (<c>NAME-findings.csv</c>) beside it. Made for spreadsheets: see <see cref="CsvText"/> for how names are written.
    /// </summary>
    Csv,

    /// <summary>
    /// Three JSON files, one per table, each an array of flat records (one object per row, the CSV's columns as its
    /// members), as <c>pandas.read_json</c> and DuckDB's <c>read_json</c> read them; UTF-8 text unescaped (shape: <see cref="RunExport.JsonSchema"/>).
    /// </summary>
    Json,

    /// <summary>Three Apache Parquet files: the importance table at the path given, the epoch and findings tables beside it (<c>NAME-epochs.parquet</c>, <c>NAME-findings.parquet</c>).</summary>
    Parquet,
}

/// <summary>The files an export wrote.</summary>
/// <param name="Importance">The importance table.</param>
/// <param name="Epochs">The epoch table.</param>
/// <param name="ImportanceRows">Rows in the importance table.</param>
/// <param name="EpochRows">Rows in the epoch table.</param>
/// <param name="Findings">The findings table.</param>
/// <param name="FindingRows">Rows in the findings table.</param>
public sealed record ExportFiles(string Importance, string Epochs, int ImportanceRows, int EpochRows, string Findings, int FindingRows);

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
    public static IReadOnlyList<string> ImportanceColumns => [.. ImportanceTable.Select(c => c.Name)];

    /// <summary>The findings table's columns, in order.</summary>
    public static IReadOnlyList<string> FindingColumns => [.. FindingTable.Select(c => c.Name)];

    /// <summary>
    /// The JSON Schema (draft 2020-12) of the JSON export: its <c>$defs</c> <c>importance</c>, <c>epochs</c> and <c>findings</c>
    /// each describe one file (an array of records); the schema itself accepts any of the three.
    /// </summary>
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
    public static string EpochsPath(string path) => Beside(path, "-epochs");

    /// <summary>The findings table's path for an importance table at <paramref name="path"/>: <c>NAME-findings.EXT</c> beside it.</summary>
    public static string FindingsPath(string path) => Beside(path, "-findings");

    private static string Beside(string path, string suffix)
    {
        ArgumentNullException.ThrowIfNull(path);
        string folder = Path.GetDirectoryName(Path.GetFullPath(path)) ?? ".";
        return Path.Combine(folder, Path.GetFileNameWithoutExtension(path) + suffix + Path.GetExtension(path));
    }

    /// <summary>Writes <paramref name="tables"/> in <paramref name="format"/> to <paramref name="path"/> (and the epoch and findings tables beside it), replacing files there.</summary>
    /// <param name="tables">The run's tables.</param>
    /// <param name="format">The file format.</param>
    /// <param name="path">The importance table's file.</param>
    /// <param name="csvText">How CSV cells hold names; JSON and Parquet always hold them exactly. Default: <see cref="CsvText.FormulaSafe"/>.</param>
    /// <exception cref="DriftWatchException">A file cannot be written (no file is left half written).</exception>
    public static ExportFiles Write(RunTables tables, ExportFormat format, string path, CsvText csvText = CsvText.FormulaSafe)
    {
        ArgumentNullException.ThrowIfNull(tables);
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        string full = Path.GetFullPath(path);
        if (Directory.Exists(full))
            throw new DriftWatchException($"--out '{full}' is a folder; pass a file name, e.g. {Path.Combine(full, "run." + format.ToString().ToLowerInvariant())}");
        string epochs = EpochsPath(full), findings = FindingsPath(full);
        var epochTable = EpochTable(tables);
        try
        {
            Directory.CreateDirectory(Path.GetDirectoryName(full)!);
            switch (format)
            {
                case ExportFormat.Csv:
                    WriteCsv(ImportanceTable, tables.Importance, full, csvText);
                    WriteCsv(epochTable, tables.Epochs, epochs, csvText);
                    WriteCsv(FindingTable, tables.Findings, findings, csvText);
                    break;
                case ExportFormat.Json:
                    WriteJson(ImportanceTable, tables.Importance, full);
                    WriteJson(epochTable, tables.Epochs, epochs);
                    WriteJson(FindingTable, tables.Findings, findings);
                    break;
                case ExportFormat.Parquet:
                    WriteParquetAsync(ImportanceTable, tables.Importance, full).GetAwaiter().GetResult();
                    WriteParquetAsync(epochTable, tables.Epochs, epochs).GetAwaiter().GetResult();
                    WriteParquetAsync(FindingTable, tables.Findings, findings).GetAwaiter().GetResult();
                    break;
                default:
                    throw new ArgumentOutOfRangeException(nameof(format), format, "unknown export format");
            }
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new DriftWatchException($"cannot write the export to '{full}': {e.Message}", e);
        }
        return new ExportFiles(full, epochs, tables.Importance.Length, tables.Epochs.Length, findings, tables.Findings.Length);
    }

    // RFC 4180: comma-separated, CRLF line ends, a field quoted when it holds a comma, a quote or a line break, quotes doubled.
    // Numbers in invariant culture, round-trip precision; a missing value is an empty field.
    private static void WriteCsv<TRow>(IReadOnlyList<Column<TRow>> columns, IReadOnlyList<TRow> rows, string path, CsvText csvText)
    {
        OutputFile.Write(path, stream =>
        {
            using var writer = CsvWriter(stream);
            writer.WriteLine(string.Join(',', columns.Select(c => CsvField(c.Name, csvText))));
            foreach (var row in rows)
            {
                writer.WriteLine(string.Join(',', columns.Select(c => c switch
                {
                    TextColumn<TRow> text => text.Value(row) is string value ? CsvField(value, csvText) : "",
                    IntegerColumn<TRow> integer => Integer(integer.Value(row)),
                    NumberColumn<TRow> number => Number(number.Value(row)),
                    _ => throw new InvalidOperationException($"column '{c.Name}' has no CSV form"),
                })));
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

    // JSON has no NaN or infinity: such a value is written as null, like a missing one. Text is written as UTF-8 as it is
    // (only quotes, backslashes and control characters escaped): the files are for people and programs, never for HTML.
    private static void WriteJson<TRow>(IReadOnlyList<Column<TRow>> columns, IReadOnlyList<TRow> rows, string path)
    {
        OutputFile.Write(path, stream =>
        {
            using var json = new Utf8JsonWriter(stream, new JsonWriterOptions { Indented = false, Encoder = JavaScriptEncoder.UnsafeRelaxedJsonEscaping });
            json.WriteStartArray();
            foreach (var row in rows)
            {
                json.WriteStartObject();
                foreach (var column in columns)
                {
                    switch (column)
                    {
                        case TextColumn<TRow> text when text.Value(row) is string value:
                            json.WriteString(column.Name, value);
                            break;
                        case TextColumn<TRow>:
                            json.WriteNull(column.Name);
                            break;
                        case IntegerColumn<TRow> integer:
                            json.WriteNumber(column.Name, integer.Value(row));
                            break;
                        case NumberColumn<TRow> number:
                            Write(json, column.Name, number.Value(row));
                            break;
                        default:
                            throw new InvalidOperationException($"column '{column.Name}' has no JSON form");
                    }
                }
                json.WriteEndObject();
            }
            json.WriteEndArray();
        });
    }

    private static void Write(Utf8JsonWriter json, string name, double? value)
    {
        if (value is double v && double.IsFinite(v))
            json.WriteNumber(name, v);
        else
            json.WriteNull(name);
    }

    private static async Task WriteParquetAsync<TRow>(IReadOnlyList<Column<TRow>> columns, IReadOnlyList<TRow> rows, string path)
    {
        var fields = columns.Select(c => c switch
        {
            TextColumn<TRow> text when text.Nullable => (DataField)new DataField<string>(c.Name, nullable: true),
            TextColumn<TRow> => new DataField<string>(c.Name),
            IntegerColumn<TRow> => new DataField<int>(c.Name),
            NumberColumn<TRow> number when number.Nullable => new DataField<double?>(c.Name),
            NumberColumn<TRow> => new DataField<double>(c.Name),
            _ => throw new InvalidOperationException($"column '{c.Name}' has no Parquet form"),
        }).ToArray();
        await OutputFile.WriteAsync(path, async file =>
        {
            await using var writer = await ParquetWriter.CreateAsync(new ParquetSchema(fields), file).ConfigureAwait(false);
            using var group = writer.CreateRowGroup();
            for (int c = 0; c < columns.Count; c++)
            {
                switch (columns[c])
                {
                    case TextColumn<TRow> text:
                        await group.WriteAsync(fields[c], [.. rows.Select(text.Value)]).ConfigureAwait(false);
                        break;
                    case IntegerColumn<TRow> integer:
                        await group.WriteAsync<int>(fields[c], rows.Select(integer.Value).ToArray().AsMemory()).ConfigureAwait(false);
                        break;
                    case NumberColumn<TRow> number when number.Nullable:
                        await group.WriteAsync<double>(fields[c], rows.Select(number.Value).ToArray().AsMemory()).ConfigureAwait(false);
                        break;
                    case NumberColumn<TRow> number:
                        await group.WriteAsync<double>(fields[c], rows.Select(r => number.Value(r) ?? double.NaN).ToArray().AsMemory()).ConfigureAwait(false);
                        break;
                }
            }
        }).ConfigureAwait(false);
    }

    private static IReadOnlyList<Column<ImportanceRow>> ImportanceTable { get; } =
    [
        new TextColumn<ImportanceRow>("run", r => r.Run),
        new IntegerColumn<ImportanceRow>("epoch", r => r.Epoch),
        new TextColumn<ImportanceRow>("method", r => r.Method),
        new TextColumn<ImportanceRow>("target", r => r.Target),
        new TextColumn<ImportanceRow>("half", r => r.Half),
        new TextColumn<ImportanceRow>("feature", r => r.Feature),
        new NumberColumn<ImportanceRow>("importance", r => r.Importance, Nullable: false),
        new NumberColumn<ImportanceRow>("share", r => r.Share, Nullable: false),
        new NumberColumn<ImportanceRow>("lower", r => r.Lower),
        new NumberColumn<ImportanceRow>("upper", r => r.Upper),
        new NumberColumn<ImportanceRow>("signed_mean", r => r.SignedMean, Nullable: false),
        new NumberColumn<ImportanceRow>("alignment", r => r.Alignment),
        new NumberColumn<ImportanceRow>("share_width", r => r.ShareWidth),
        new NumberColumn<ImportanceRow>("share_gap", r => r.ShareGap),
        new NumberColumn<ImportanceRow>("share_gap_width", r => r.ShareGapWidth),
        new NumberColumn<ImportanceRow>("alignment_gap", r => r.AlignmentGap),
        new NumberColumn<ImportanceRow>("alignment_gap_width", r => r.AlignmentGapWidth),
    ];

    private static IReadOnlyList<Column<FindingRow>> FindingTable { get; } =
    [
        new TextColumn<FindingRow>("run", r => r.Run),
        new IntegerColumn<FindingRow>("from_epoch", r => r.FromEpoch),
        new IntegerColumn<FindingRow>("to_epoch", r => r.ToEpoch),
        new IntegerColumn<FindingRow>("epochs", r => r.Epochs),
        new IntegerColumn<FindingRow>("since_epoch", r => r.SinceEpoch),
        new TextColumn<FindingRow>("kind", r => r.Kind),
        new TextColumn<FindingRow>("feature", r => r.Feature),
        new TextColumn<FindingRow>("severity", r => r.Severity),
        new NumberColumn<FindingRow>("statistic", r => r.Statistic),
        new TextColumn<FindingRow>("measure", r => r.Measure),
        new TextColumn<FindingRow>("unit", r => r.Unit),
        new NumberColumn<FindingRow>("bound", r => r.Bound),
        new TextColumn<FindingRow>("bound_kind", r => r.BoundKind),
        new TextColumn<FindingRow>("evidence", r => r.Evidence),
        new TextColumn<FindingRow>("seen_only_by", r => r.SeenOnlyBy),
        new NumberColumn<FindingRow>("agreement", r => r.Agreement),
    ];

    private static List<Column<EpochRow>> EpochTable(RunTables tables)
    {
        var columns = new List<Column<EpochRow>>
        {
            new TextColumn<EpochRow>("run", e => e.Run),
            new IntegerColumn<EpochRow>("epoch", e => e.Epoch),
            new TextColumn<EpochRow>("verdict", e => e.Verdict, Nullable: true),
            new IntegerColumn<EpochRow>("findings", e => e.Findings),
        };
        columns.AddRange(tables.MetricColumns.Select(name => new NumberColumn<EpochRow>(name, e => e.Values.GetValueOrDefault(name))));
        return columns;
    }

    private abstract record Column<TRow>(string Name);

    private sealed record TextColumn<TRow>(string Name, Func<TRow, string?> Value, bool Nullable = false) : Column<TRow>(Name);

    private sealed record IntegerColumn<TRow>(string Name, Func<TRow, int> Value) : Column<TRow>(Name);

    private sealed record NumberColumn<TRow>(string Name, Func<TRow, double?> Value, bool Nullable = true) : Column<TRow>(Name);
}
