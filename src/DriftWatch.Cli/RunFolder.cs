using System.Collections.Immutable;
using System.Globalization;
using System.Text;
using System.Text.Json;
using System.Text.RegularExpressions;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;

namespace DriftWatch.Cli;

/// <summary>One epoch of a run folder that is complete: its TorchScript snapshot and its metrics line are both there.</summary>
/// <param name="Epoch">The epoch number.</param>
/// <param name="SnapshotPath">The TorchScript file.</param>
/// <param name="Metrics">The epoch's losses and other metrics.</param>
internal sealed record FolderEpoch(int Epoch, string SnapshotPath, EpochMetrics Metrics);

/// <summary>
/// Reads a run folder written by <c>hooks/driftwatch_follow.py</c> (docs/pytorch.md): the schema,
/// the probe rows, the per-epoch snapshots and metrics lines, and the marker that says the run has finished.
/// Nothing read here is executed; only the snapshots are, by <see cref="TorchScriptModel"/>.
/// </summary>
internal sealed partial class RunFolder
{
    /// <summary>The schema file's name.</summary>
    public const string SchemaFile = "schema.json";

    /// <summary>The probe rows' file name.</summary>
    public const string ProbeFile = "probe.csv";

    /// <summary>The metrics file's name (JSON Lines).</summary>
    public const string MetricsFile = "metrics.jsonl";

    /// <summary>The marker written when the training loop closes the folder.</summary>
    public const string FinishedFile = "finished";

    /// <summary>
    /// The newest run-folder contract this version reads (<c>"contract"</c> in the schema file): 1, the first; 2, a helper that
    /// waits for the verdict files <c>follow</c> writes. A folder of a newer contract is refused with one line.
    /// </summary>
    public const int NewestContract = 2;

    private RunFolder(string path, FeatureSchema schema, ProbeSet probe, AttributionTarget target, string encodeMethod, string scoreMethod,
        TorchScriptEntry? entry, ImmutableDictionary<string, ImmutableDictionary<long, int>> valueCounts)
    {
        Entry = entry;
        Path = path;
        Schema = schema;
        Probe = probe;
        Target = target;
        EncodeMethod = encodeMethod;
        ScoreMethod = scoreMethod;
        TrainingValueCounts = valueCounts;
    }

    /// <summary>The folder's full path.</summary>
    public string Path { get; }

    /// <summary>The features and the columns each owns.</summary>
    public FeatureSchema Schema { get; }

    /// <summary>The probe rows, held-out half first.</summary>
    public ProbeSet Probe { get; }

    /// <summary>The attributed output.</summary>
    public AttributionTarget Target { get; }

    /// <summary>The encode method's name in each snapshot.</summary>
    public string EncodeMethod { get; }

    /// <summary>The score method's name in each snapshot.</summary>
    public string ScoreMethod { get; }

    /// <summary>The linear layer the score method applies first and the method after it (<c>entryLayer</c>, <c>scoreAfterEntryMethod</c>), or null.</summary>
    public TorchScriptEntry? Entry { get; }

    /// <summary>Per categorical feature, training rows per id (empty when the schema gives none).</summary>
    public ImmutableDictionary<string, ImmutableDictionary<long, int>> TrainingValueCounts { get; }

    /// <summary>Whether the schema file is there yet (the helper writes it at the first epoch).</summary>
    public static bool HasSchema(string folder) => File.Exists(System.IO.Path.Combine(folder, SchemaFile));

    /// <summary>Reads the schema and the probe rows.</summary>
    /// <exception cref="DriftWatchException">A missing folder or file, or content that does not follow the contract.</exception>
    public static RunFolder Open(string folder)
    {
        string path = System.IO.Path.GetFullPath(folder);
        if (!Directory.Exists(path))
            throw new DriftWatchException($"run folder '{folder}' does not exist; give the folder the training loop writes with driftwatch_follow.py");
        string schemaPath = System.IO.Path.Combine(path, SchemaFile);
        if (!File.Exists(schemaPath))
            throw new DriftWatchException($"run folder '{folder}' has no {SchemaFile}; the Python helper writes it at the first epoch");
        RequireRegularFile(schemaPath, "the schema");
        var (schema, target, encode, score, entry, counts) = ReadSchema(schemaPath);
        var probe = ReadProbe(System.IO.Path.Combine(path, ProbeFile), schema);
        return new RunFolder(path, schema, probe, target, encode, score, entry, counts);
    }

    /// <summary>Whether the training loop has closed the folder.</summary>
    public bool IsFinished => File.Exists(System.IO.Path.Combine(Path, FinishedFile));

    /// <summary>The complete epochs in order, checking that no epoch lacks its snapshot or its metrics line.</summary>
    /// <param name="finished">Whether the run has finished: then the newest snapshot must have its metrics line too.</param>
    /// <exception cref="DriftWatchException">A missing snapshot or metrics line, a repeated epoch, or a bad metrics line.</exception>
    public IReadOnlyList<FolderEpoch> CompleteEpochs(bool finished)
    {
        var snapshots = new SortedDictionary<int, string>();
        foreach (string file in Directory.EnumerateFiles(Path))
        {
            var match = SnapshotName().Match(System.IO.Path.GetFileName(file));
            if (match.Success && int.TryParse(match.Groups[1].Value, NumberStyles.None, CultureInfo.InvariantCulture, out int epoch))
            {
                // Loading a named pipe would wait for a writer for ever; a device or socket is no snapshot either.
                RequireRegularFile(file, $"epoch {epoch}'s snapshot");
                if (!snapshots.TryAdd(epoch, file))
                    throw new DriftWatchException($"run folder '{Path}': epoch {epoch} has two snapshots ('{System.IO.Path.GetFileName(snapshots[epoch])}' and '{System.IO.Path.GetFileName(file)}'); keep one");
            }
        }
        var metrics = ReadMetrics(System.IO.Path.Combine(Path, MetricsFile));
        int newestSnapshot = snapshots.Count == 0 ? int.MinValue : snapshots.Keys.Max();
        foreach (var epoch in metrics.Keys.Where(e => !snapshots.ContainsKey(e)))
            throw new DriftWatchException($"run folder '{Path}': epoch {epoch} is missing its snapshot {SnapshotFile(epoch)} (its metrics line is in {MetricsFile}); restore the file or start a new folder");
        foreach (var epoch in snapshots.Keys.Where(e => !metrics.ContainsKey(e) && (finished || e != newestSnapshot)))
            throw new DriftWatchException($"run folder '{Path}': epoch {epoch} is missing its metrics line in {MetricsFile} (its snapshot {SnapshotFile(epoch)} is there); each epoch needs both");
        return snapshots.Where(s => metrics.ContainsKey(s.Key)).Select(s => new FolderEpoch(s.Key, s.Value, metrics[s.Key])).ToList();
    }

    /// <summary>Refuses a path that is not a regular file (a named pipe, device or socket), before anything opens it.</summary>
    /// <exception cref="DriftWatchException">The path is another kind of file; the message names the kind.</exception>
    internal static void RequireRegularFile(string path, string what)
    {
        if (FileKinds.Of(path) is { } kind and not FileKinds.Regular)
            throw new DriftWatchException($"run folder file '{path}' ({what}) is a {FileKinds.Describe(kind)}, not a regular file; only regular files are read — remove it, or let the training loop write the file itself");
    }

    /// <summary>The snapshot file name of an epoch, e.g. <c>epoch-0007.pt</c>.</summary>
    public static string SnapshotFile(int epoch) => Storage.RunSnapshots.TorchScriptFile(epoch);

    /// <summary>The verdict file name of an epoch, e.g. <c>verdict-0007.json</c>.</summary>
    public static string VerdictFile(int epoch) => string.Create(CultureInfo.InvariantCulture, $"verdict-{epoch:D4}.json");

    /// <summary>
    /// Writes the verdict of an epoch into the folder as <c>verdict-NNNN.json</c> (epoch, verdict, kinds, reasons, findings),
    /// under a temporary name and renamed, so the Python helper never reads half a file.
    /// </summary>
    /// <exception cref="DriftWatchException">The file cannot be written.</exception>
    public void WriteVerdict(Verdict verdict)
    {
        var document = new Dictionary<string, object>
        {
            ["contract"] = NewestContract,
            ["epoch"] = verdict.Epoch,
            ["verdict"] = verdict.Kind.ToString(),
            ["kinds"] = verdict.Findings.Where(f => f.Severity == verdict.Kind).Select(f => f.Kind.Name).Distinct().ToList(),
            ["reasons"] = verdict.Reasons.ToList(),
            ["findings"] = verdict.Findings.Select(f => new Dictionary<string, object>
            {
                ["kind"] = f.Kind.Name,
                ["severity"] = f.Severity.ToString(),
                ["feature"] = f.Feature,
                ["evidence"] = f.Evidence,
            }).ToList(),
        };
        OutputFile.WriteText(System.IO.Path.Combine(Path, VerdictFile(verdict.Epoch)), JsonSerializer.Serialize(document, VerdictJson) + "\n");
    }

    private static readonly JsonSerializerOptions VerdictJson = new() { WriteIndented = true, Encoder = System.Text.Encodings.Web.JavaScriptEncoder.UnsafeRelaxedJsonEscaping };

    [GeneratedRegex(@"^epoch-(\d{1,9})\.pt$", RegexOptions.CultureInvariant)]
    private static partial Regex SnapshotName();

    private static (FeatureSchema, AttributionTarget, string, string, TorchScriptEntry?, ImmutableDictionary<string, ImmutableDictionary<long, int>>) ReadSchema(string path)
    {
        string Bad(string what) => $"schema file '{path}': {what}";
        JsonDocument document;
        try
        {
            document = JsonDocument.Parse(File.ReadAllText(path, Encoding.UTF8));
        }
        catch (JsonException e)
        {
            throw new DriftWatchException(Bad($"not valid JSON ({e.Message})"));
        }
        using (document)
        {
            var root = document.RootElement;
            if (root.ValueKind != JsonValueKind.Object || !root.TryGetProperty("features", out var features) || features.ValueKind != JsonValueKind.Array)
                throw new DriftWatchException(Bad("needs an object with a \"features\" array"));
            if (root.TryGetProperty("contract", out var contract))
            {
                if (!contract.TryGetInt32(out int version) || version < 1)
                    throw new DriftWatchException(Bad("\"contract\" must be a whole number of at least 1; let driftwatch_follow.py write the schema"));
                if (version > NewestContract)
                {
                    throw new DriftWatchException(Bad($"written by a newer driftwatch_follow.py (run-folder contract {version}); this driftwatch reads contracts up to {NewestContract} — "
                        + "update driftwatch, or write the folder with the driftwatch_follow.py that comes with this version (hooks/)"));
                }
            }
            var builder = FeatureSchema.CreateBuilder();
            int column = 0, index = 0;
            foreach (var feature in features.EnumerateArray())
            {
                string name = Text(feature, "name") ?? throw new DriftWatchException(Bad($"feature #{index} has no \"name\""));
                string kind = Text(feature, "kind") ?? "";
                int first = Whole(feature, "firstColumn", Bad($"feature '{name}'"));
                int count = Whole(feature, "columnCount", Bad($"feature '{name}'"));
                if (first != column)
                    throw new DriftWatchException(Bad($"feature '{name}' starts at column {first}; columns must follow on without gaps, so it should start at {column}"));
                if (kind == "dense")
                {
                    if (count != 1)
                        throw new DriftWatchException(Bad($"dense feature '{name}' owns {count} columns; a dense feature owns exactly 1"));
                    builder.AddDense(name);
                }
                else if (kind == "categorical")
                {
                    builder.AddCategorical(name, count);
                }
                else
                {
                    throw new DriftWatchException(Bad($"feature '{name}' has kind '{kind}'; use \"dense\" or \"categorical\""));
                }
                column += count;
                index++;
            }
            var schema = builder.Build();
            var target = AttributionTarget.Parse(Text(root, "target") ?? "logit");
            string encode = Text(root, "encodeMethod") ?? "encode";
            string score = Text(root, "scoreMethod") ?? "score";
            string? entryLayer = Text(root, "entryLayer");
            string? afterEntry = Text(root, "scoreAfterEntryMethod");
            if (entryLayer is null && afterEntry is not null)
                throw new DriftWatchException(Bad("\"scoreAfterEntryMethod\" is given without \"entryLayer\"; name the linear layer the score method applies first, or drop both"));
            if (entryLayer is not null && entryLayer.Trim().Length == 0)
                throw new DriftWatchException(Bad("\"entryLayer\" is empty; give the module path of the score method's first linear layer (e.g. \"body.0\") or drop it"));
            var entry = entryLayer is null ? null : new TorchScriptEntry(entryLayer, afterEntry ?? "score_after_entry");
            var counts = ImmutableDictionary<string, ImmutableDictionary<long, int>>.Empty;
            if (root.TryGetProperty("trainingValueCounts", out var perFeature) && perFeature.ValueKind == JsonValueKind.Object)
            {
                foreach (var feature in perFeature.EnumerateObject())
                {
                    var values = ImmutableDictionary.CreateBuilder<long, int>();
                    foreach (var value in feature.Value.EnumerateObject())
                    {
                        if (!long.TryParse(value.Name, NumberStyles.AllowLeadingSign, CultureInfo.InvariantCulture, out long id) || !value.Value.TryGetInt32(out int n) || n < 0)
                            throw new DriftWatchException(Bad($"trainingValueCounts of '{feature.Name}': '{value.Name}' must be an integer id with a whole count"));
                        values[id] = n;
                    }
                    counts = counts.SetItem(feature.Name, values.ToImmutable());
                }
            }
            return (schema, target, encode, score, entry, counts);
        }
    }

    private static string? Text(JsonElement element, string name) =>
        element.ValueKind == JsonValueKind.Object && element.TryGetProperty(name, out var value) && value.ValueKind == JsonValueKind.String ? value.GetString() : null;

    private static int Whole(JsonElement element, string name, string where) =>
        element.TryGetProperty(name, out var value) && value.TryGetInt32(out int number) && number >= 0
            ? number
            : throw new DriftWatchException($"{where}: \"{name}\" must be a whole number of at least 0");

    private static ProbeSet ReadProbe(string path, FeatureSchema schema)
    {
        if (!File.Exists(path))
            throw new DriftWatchException($"run folder has no {ProbeFile} ('{path}'); the Python helper writes it with the schema at the first epoch");
        RequireRegularFile(path, "the probe rows");
        var lines = File.ReadAllLines(path, Encoding.UTF8).Where(l => l.Length > 0).ToList();
        var dense = schema.Features.Where(f => f.Kind == FeatureKind.Dense).Select(f => f.Name).ToList();
        var categorical = schema.Features.Where(f => f.Kind == FeatureKind.Categorical).Select(f => f.Name).ToList();
        var expected = dense.Concat(categorical).Append("label").Append("half").ToList();
        if (lines.Count == 0 || !SplitCsv(lines[0]).SequenceEqual(expected))
            throw new DriftWatchException($"probe file '{path}': the header must be the dense features, the categorical features (schema order), label, half: {string.Join(",", expected)}");
        var halves = new[] { new List<string[]>(), new List<string[]>() };
        for (int i = 1; i < lines.Count; i++)
        {
            var cells = SplitCsv(lines[i]);
            if (cells.Count != expected.Count)
                throw new DriftWatchException($"probe file '{path}', line {i + 1}: {cells.Count} values; the header has {expected.Count}");
            int half = cells[^1] switch
            {
                "held-out" => 0,
                "training" => 1,
                _ => throw new DriftWatchException($"probe file '{path}', line {i + 1}: half '{cells[^1]}' must be held-out or training"),
            };
            halves[half].Add([.. cells]);
        }
        ProbeRows Rows(List<string[]> rows)
        {
            var d = new float[rows.Count * dense.Count];
            var c = new long[rows.Count * categorical.Count];
            var y = new float[rows.Count];
            for (int r = 0; r < rows.Count; r++)
            {
                for (int j = 0; j < dense.Count; j++)
                    d[r * dense.Count + j] = Number(rows[r][j], path, dense[j]);
                for (int j = 0; j < categorical.Count; j++)
                {
                    string text = rows[r][dense.Count + j];
                    if (!long.TryParse(text, NumberStyles.AllowLeadingSign, CultureInfo.InvariantCulture, out long id) || id < 0)
                        throw new DriftWatchException($"probe file '{path}': id '{text}' of '{categorical[j]}' must be a whole number of at least 0");
                    c[r * categorical.Count + j] = id;
                }
                y[r] = Number(rows[r][^2], path, "label");
            }
            return new ProbeRows(d, dense.Count, c, categorical.Count, y);
        }
        if (halves[0].Count == 0 || halves[1].Count == 0)
            throw new DriftWatchException($"probe file '{path}' has {halves[0].Count} held-out and {halves[1].Count} training rows; both halves need rows");
        return new ProbeSet(Rows(halves[0]), Rows(halves[1]));
    }

    private static float Number(string text, string path, string column) =>
        float.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out float value) && float.IsFinite(value)
            ? value
            : throw new DriftWatchException($"probe file '{path}': '{text}' in column '{column}' is not a finite number");

    // Minimal CSV: commas, double-quoted cells with doubled quotes inside.
    internal static List<string> SplitCsv(string line)
    {
        var cells = new List<string>();
        var cell = new StringBuilder();
        bool quoted = false;
        for (int i = 0; i < line.Length; i++)
        {
            char ch = line[i];
            if (quoted)
            {
                if (ch == '"' && i + 1 < line.Length && line[i + 1] == '"')
                {
                    cell.Append('"');
                    i++;
                }
                else if (ch == '"')
                {
                    quoted = false;
                }
                else
                {
                    cell.Append(ch);
                }
            }
            else if (ch == '"')
            {
                quoted = true;
            }
            else if (ch == ',')
            {
                cells.Add(cell.ToString());
                cell.Clear();
            }
            else if (ch != '\r')
            {
                cell.Append(ch);
            }
        }
        cells.Add(cell.ToString());
        return cells;
    }

    private static Dictionary<int, EpochMetrics> ReadMetrics(string path)
    {
        var metrics = new Dictionary<int, EpochMetrics>();
        if (!File.Exists(path))
            return metrics;
        RequireRegularFile(path, "the metrics file");
        string text;
        using (var stream = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.ReadWrite | FileShare.Delete))
        using (var reader = new StreamReader(stream, Encoding.UTF8))
            text = reader.ReadToEnd();
        // The last line counts only once its newline is written: the helper appends whole lines.
        var lines = text.Split('\n');
        for (int i = 0; i < lines.Length - 1; i++)
        {
            string line = lines[i].Trim();
            if (line.Length == 0)
                continue;
            var (epoch, values) = ParseMetricsLine(line, path, i + 1);
            if (!metrics.TryAdd(epoch, values))
                throw new DriftWatchException($"metrics file '{path}', line {i + 1}: epoch {epoch} appears twice; keep one line per epoch");
        }
        return metrics;
    }

    private static (int Epoch, EpochMetrics Metrics) ParseMetricsLine(string line, string path, int number)
    {
        string Bad(string what) => $"metrics file '{path}', line {number}: {what}";
        try
        {
            using var document = JsonDocument.Parse(line);
            var root = document.RootElement;
            if (root.ValueKind != JsonValueKind.Object)
                throw new DriftWatchException(Bad("must be one JSON object"));
            if (!root.TryGetProperty("epoch", out var epochValue) || !epochValue.TryGetInt32(out int epoch) || epoch < 0)
                throw new DriftWatchException(Bad("needs \"epoch\" as a whole number of at least 0"));
            double? train = null, validation = null;
            var others = ImmutableDictionary.CreateBuilder<string, double>(StringComparer.Ordinal);
            foreach (var property in root.EnumerateObject())
            {
                if (property.Name == "epoch")
                    continue;
                double value = property.Value.ValueKind switch
                {
                    JsonValueKind.Number => property.Value.GetDouble(),
                    // Python's json writes non-finite floats as bare NaN/Infinity, which JSON lacks; the helper writes them as strings.
                    JsonValueKind.String when double.TryParse(property.Value.GetString(), NumberStyles.Float, CultureInfo.InvariantCulture, out double v) => v,
                    _ => throw new DriftWatchException(Bad($"\"{property.Name}\" must be a number")),
                };
                if (property.Name == EpochMetrics.TrainLossKey)
                    train = value;
                else if (property.Name == EpochMetrics.ValidationLossKey)
                    validation = value;
                else
                    others[property.Name] = value;
            }
            if (train is null || validation is null)
                throw new DriftWatchException(Bad($"needs both \"{EpochMetrics.TrainLossKey}\" and \"{EpochMetrics.ValidationLossKey}\""));
            return (epoch, new EpochMetrics(train.Value, validation.Value) { Others = others.ToImmutable() });
        }
        catch (JsonException e)
        {
            throw new DriftWatchException(Bad($"not valid JSON ({e.Message})"));
        }
    }
}
