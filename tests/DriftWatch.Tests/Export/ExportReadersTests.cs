using System.Diagnostics;
using System.Text.Json;
using DriftWatch.Cli;
using DriftWatch.Export;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Export;

/// <summary>
/// Every export read by the readers people use: pandas (Debian's python3-pandas) reads the CSV and JSON files, DuckDB (npm's
/// @duckdb/node-api) reads the CSV, JSON and Parquet files; the findings table each reads must match <c>check --json</c>.
/// </summary>
/// <remarks>
/// Debian ships no Parquet engine for pandas (neither pyarrow nor fastparquet), so pandas reads CSV and JSON only; the Parquet
/// files are also read by Apache Arrow's C++ reader in <see cref="ExportTests"/>. Where a reader is missing the test is skipped,
/// except under CI=true, where .ci/run installs both and a missing one fails.
/// </remarks>
public sealed class ExportReadersTests : IClassFixture<DemoStoreFixture>
{
    private const string Python = "/usr/bin/python3";
    private const string DuckDbVariable = "DRIFTWATCH_DUCKDB_DIR";

    private static readonly string[] TextColumns = ["kind", "feature", "severity", "measure", "unit", "bound_kind", "evidence"];

    private readonly DemoStoreFixture _fixture;

    public ExportReadersTests(DemoStoreFixture fixture) => _fixture = fixture;

    private static bool InCi => string.Equals(Environment.GetEnvironmentVariable("CI"), "true", StringComparison.OrdinalIgnoreCase);

    [SkippableFact]
    public void PandasReadsTheCsvAndJsonExportsAndTheirFindingsAreCheckJsonsFindings()
    {
        RequireOrSkip(File.Exists(Python) && Run(Python, ["-c", "import pandas"]).Code == 0, "python3-pandas");
        using var folder = new TempFolder();
        var (check, counts) = ExportAll(folder);

        // pandas.read_csv (round-trip float parsing) and pandas.read_json of an array of records (precise floats); each
        // table is printed back with Python's own json module, whose float repr round-trips.
        string script = """
            import json, sys
            import pandas as pd
            def out(df):
                df = df.astype(object).where(df.notna(), None)
                return df.to_dict(orient="records")
            result = {}
            for fmt in ("csv", "json"):
                tables = {}
                for table, suffix in (("importance", ""), ("epochs", "-epochs"), ("findings", "-findings")):
                    path = sys.argv[1] + "/run" + suffix + "." + fmt
                    if fmt == "csv":
                        df = pd.read_csv(path, float_precision="round_trip")
                    else:
                        df = pd.read_json(path, orient="records", precise_float=True, convert_dates=False, dtype=False)
                    tables[table] = {"rows": len(df), "records": out(df) if table == "findings" else []}
                result[fmt] = tables
            print(json.dumps(result))
            """;
        string path = Path.Combine(folder.Path, "read.py");
        File.WriteAllText(path, script);
        var (code, output) = Run(Python, [path, folder.Path]);
        Assert.True(code == 0, output);
        using var read = JsonDocument.Parse(output);
        foreach (string format in new[] { "csv", "json" })
            AssertTables(read.RootElement.GetProperty(format), counts, check, $"pandas, {format}");
    }

    [SkippableFact]
    public void DuckDbReadsTheCsvJsonAndParquetExportsAndTheirFindingsAreCheckJsonsFindings()
    {
        string? duckdb = Environment.GetEnvironmentVariable(DuckDbVariable);
        bool present = !string.IsNullOrWhiteSpace(duckdb) && Directory.Exists(Path.Combine(duckdb, "node_modules", "@duckdb", "node-api")) && File.Exists("/usr/bin/node");
        RequireOrSkip(present, $"@duckdb/node-api (npm install it into a folder and set {DuckDbVariable} to it, as .ci/run does)");
        using var folder = new TempFolder();
        var (check, counts) = ExportAll(folder);

        // DuckDB's own CSV, JSON and Parquet readers; rows come back as JSON values (doubles as JavaScript numbers, exact).
        string script = """
            import { createRequire } from 'node:module';
            import { pathToFileURL } from 'node:url';
            const require = createRequire(process.env.DUCKDB_DIR + '/package.json');
            const { DuckDBInstance } = await import(pathToFileURL(require.resolve('@duckdb/node-api')).href);
            const db = await DuckDBInstance.create(':memory:');
            const c = await db.connect();
            const readers = { csv: 'read_csv', json: 'read_json', parquet: 'read_parquet' };
            const result = {};
            for (const fmt of Object.keys(readers)) {
              const tables = {};
              for (const [table, suffix] of [['importance', ''], ['epochs', '-epochs'], ['findings', '-findings']]) {
                const path = (process.argv[2] + '/run' + suffix + '.' + fmt).replaceAll("'", "''");
                const reader = readers[fmt];
                const rows = (await c.runAndReadAll(`select count(*)::INTEGER as n from ${reader}('${path}')`)).getRowObjectsJson()[0].n;
                const records = table === 'findings' ? (await c.runAndReadAll(`select * from ${reader}('${path}')`)).getRowObjectsJson() : [];
                tables[table] = { rows, records };
              }
              result[fmt] = tables;
            }
            console.log(JSON.stringify(result));
            """;
        string path = Path.Combine(folder.Path, "read.mjs");
        File.WriteAllText(path, script);
        var (code, output) = Run("/usr/bin/node", [path, folder.Path], ("DUCKDB_DIR", duckdb!));
        Assert.True(code == 0, output);
        using var read = JsonDocument.Parse(output);
        foreach (string format in new[] { "csv", "json", "parquet" })
            AssertTables(read.RootElement.GetProperty(format), counts, check, $"DuckDB, {format}");
    }

    [Fact]
    public void CommandJsonAndJsonExportsKeepTextAsUtf8WithoutHtmlEscapes()
    {
        using var folder = new TempFolder();
        string exported = Path.Combine(folder.Path, "run.json");
        Assert.Equal(ExitCodes.Fine, Cli("export", DemoStoreFixture.LeakRun, "--format", "json", "--out", exported).Code);
        string check = Cli("check", DemoStoreFixture.LeakRun, "--json").Output;
        string show = Cli("show", DemoStoreFixture.LeakRun, "--json").Output;
        string findings = File.ReadAllText(RunExport.FindingsPath(exported));

        // The leak's evidence quotes the feature ('…') and signs its gap (+0.69): written as they are, not \u0027 or \u002B.
        foreach (string text in new[] { check, show, findings })
        {
            Assert.Contains("'", text, StringComparison.Ordinal);
            Assert.DoesNotContain("\\u0027", text, StringComparison.Ordinal);
            Assert.DoesNotContain("\\u002B", text, StringComparison.Ordinal);
        }
        // One naming convention: snake_case keys in show --json and check --json, as in the export.
        using var shown = JsonDocument.Parse(show);
        Assert.True(shown.RootElement.GetProperty("epochs")[0].TryGetProperty("validation_loss", out _));
        using var checkedRun = JsonDocument.Parse(check);
        Assert.True(checkedRun.RootElement.TryGetProperty("halt_advised", out _));
    }

    [Fact]
    public void AfterAHaltCheckAndTheReportNameTheCommandThatWritesTheBestEpochsWeights()
    {
        var (code, output) = Cli("check", DemoStoreFixture.LeakRun);
        using var store = DriftWatch.Storage.RunStore.OpenForReading(_fixture.StorePath);
        var best = DriftWatch.Storage.RunSnapshots.Choose(store, DemoStoreFixture.LeakRun, "best");
        var history = DriftWatch.Charts.RunHistory.Load(store, DemoStoreFixture.LeakRun, DriftWatch.Charts.RunHistory.DefaultMethod);
        var steps = DriftWatch.Charts.Report.RunReport.NextSteps(history, DriftWatch.Charts.Report.RunFindings.Summarise(history));

        // The demo's leak run halts (demo/README.md, ground truth: a planted leak) and keeps a snapshot of every epoch.
        Assert.Equal(ExitCodes.Halt, code);
        Assert.Contains($"epoch {best.Epoch} had the lowest validation loss; write out its weights with: driftwatch weights {DemoStoreFixture.LeakRun} --epoch best --out {DemoStoreFixture.LeakRun}-best.weights", output, StringComparison.Ordinal);
        Assert.Contains(steps, s => s.Contains($"driftwatch weights {DemoStoreFixture.LeakRun} --epoch best", StringComparison.Ordinal));
    }

    // Exports the leak run in every format through the CLI and reads check --json: its latest findings and the row counts.
    private (JsonElement Check, (int Importance, int Epochs, int Findings) Counts) ExportAll(TempFolder folder)
    {
        (int, int, int) counts = default;
        foreach (string format in new[] { "csv", "json", "parquet" })
        {
            var (code, output) = Cli("export", DemoStoreFixture.LeakRun, "--format", format, "--out", Path.Combine(folder.Path, "run." + format), "--json", "--exact-names");
            Assert.Equal(ExitCodes.Fine, code);
            using var written = JsonDocument.Parse(output);
            counts = (written.RootElement.GetProperty("importance").GetProperty("rows").GetInt32(),
                written.RootElement.GetProperty("epochs").GetProperty("rows").GetInt32(),
                written.RootElement.GetProperty("findings").GetProperty("rows").GetInt32());
        }
        var (checkCode, checkOutput) = Cli("check", DemoStoreFixture.LeakRun, "--json");
        Assert.Contains(checkCode, new[] { ExitCodes.Fine, ExitCodes.Halt });
        return (JsonDocument.Parse(checkOutput).RootElement.Clone(), counts);
    }

    private static void AssertTables(JsonElement tables, (int Importance, int Epochs, int Findings) counts, JsonElement check, string reader)
    {
        Assert.True(counts.Findings > 0, "the leak run's export has no findings");
        Assert.Equal(counts.Importance, tables.GetProperty("importance").GetProperty("rows").GetInt32());
        Assert.Equal(counts.Epochs, tables.GetProperty("epochs").GetProperty("rows").GetInt32());
        var rows = tables.GetProperty("findings").GetProperty("records").EnumerateArray().ToList();
        Assert.Equal(counts.Findings, rows.Count);

        // The spans that reach the latest epoch are exactly the findings check --json lists for it, value for value.
        int latest = check.GetProperty("epoch").GetInt32();
        var expected = check.GetProperty("findings").EnumerateArray().Select(Key).Order(StringComparer.Ordinal).ToList();
        var actual = rows.Where(r => Integer(r.GetProperty("to_epoch")) == latest).Select(Key).Order(StringComparer.Ordinal).ToList();
        Assert.NotEmpty(expected);
        Assert.True(expected.SequenceEqual(actual), $"{reader}: the findings table's spans at epoch {latest} differ from check --json:\n  {string.Join("\n  ", actual)}\nagainst\n  {string.Join("\n  ", expected)}");
    }

    // One finding as comparable text: its text columns (a reader's null for an empty CSV field read as ""), then its statistic and bound exactly.
    private static string Key(JsonElement finding)
    {
        var parts = TextColumns.Select(c => finding.GetProperty(c) is { ValueKind: JsonValueKind.String } v ? v.GetString()! : "").ToList();
        parts.Add(Number(finding.GetProperty("statistic")));
        parts.Add(Number(finding.GetProperty("bound")));
        return string.Join(" | ", parts);
    }

    private static string Number(JsonElement value) =>
        value.ValueKind == JsonValueKind.Null ? "null" : value.GetDouble().ToString("R", System.Globalization.CultureInfo.InvariantCulture);

    private static int Integer(JsonElement value) => value.ValueKind == JsonValueKind.String ? int.Parse(value.GetString()!, System.Globalization.CultureInfo.InvariantCulture) : value.GetInt32();

    private static void RequireOrSkip(bool present, string what)
    {
        Assert.False(!present && InCi, $"CI=true but {what} is missing: .ci/run installs it; the export must be read by it in CI");
        Skip.IfNot(present, $"{what} is not installed: the exports were not read by it");
    }

    private (int Code, string Output) Cli(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run([.. args, "--store", _fixture.StorePath], output, error);
        return (code, output.ToString() + error);
    }

    private static (int Code, string Output) Run(string program, string[] arguments, params (string Name, string Value)[] environment)
    {
        var start = new ProcessStartInfo(program) { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        foreach (string argument in arguments)
            start.ArgumentList.Add(argument);
        foreach (var (name, value) in environment)
            start.Environment[name] = value;
        using var process = Process.Start(start)!;
        var error = process.StandardError.ReadToEndAsync();
        string output = process.StandardOutput.ReadToEnd();
        process.WaitForExit();
        return (process.ExitCode, process.ExitCode == 0 ? output : output + error.Result);
    }
}
