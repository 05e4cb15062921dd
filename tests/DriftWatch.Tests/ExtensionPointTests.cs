using System.Collections.Immutable;
using System.Reflection;
using System.Text.Json;
using DriftWatch.Attribution;
using DriftWatch.Charts;
using DriftWatch.Cli;
using DriftWatch.Detection;
using DriftWatch.Export;
using DriftWatch.Hooks;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;

namespace DriftWatch.Tests;

// The contributor guide's list of what each extension point touches (DEVELOPERS.md, "Extension points"), checked true
// (common practice): a throwaway example where the seam takes one from outside, a convention over the assembly where
// the seam is a registration list. The finding-rule seam is checked by Detection/FindingRuleTests.
public sealed class ExtensionPointTests
{
    // An attribution method written outside the project: the input's difference from its baseline, column by column.
    private sealed class DifferenceFromBaseline : IAttributionMethod
    {
        public string Name => "difference-from-baseline";

        public ImmutableSortedDictionary<string, string> Settings { get; } = MethodSettingsReader.Of(("scale", "1"));

        public ColumnAttribution Attribute(AttributionInput input)
        {
            using var scope = torch.NewDisposeScope();
            var difference = (input.Inputs - input.BaselineRows()).contiguous();
            return new ColumnAttribution(input.Rows, input.Columns, Gradients.ToArray(difference), null, 0);
        }
    }

    [Fact]
    public void AnAttributionMethodFromOutsideRunsInTheMonitorWithNothingElseChanged()
    {
        using var temp = new TempFolder();
        using var model = new SmallNet(3, 5, 4);
        var probe = TestProbes.Small();
        using (var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = temp.File("s.litedb"),
            RunName = "throwaway",
            Schema = model.Schema,
            Probe = probe,
            Methods = [new DifferenceFromBaseline()],
        }))
        {
            monitor.EndEpoch(model, 1, new EpochMetrics(0.7, 0.7));
        }

        using var store = RunStore.OpenForReading(temp.File("s.litedb"));
        var run = store.GetRun("throwaway");
        var map = Assert.Single(store.Maps(run.Id, "difference-from-baseline"));
        Assert.Equal("1", map.Settings["scale"]);
        // With a zero baseline the map is the encoded probe itself, summed over each feature's columns.
        using var scope = torch.NewDisposeScope();
        var rows = probe.Rows;
        var encoded = model.Encode(torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]), torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount]));
        var expected = RunReview.ToMap(map);
        var columns = Gradients.ToArray(encoded.contiguous());
        for (int r = 0; r < rows.Count; r++)
        {
            for (int f = 0; f < model.Schema.Count; f++)
            {
                var feature = model.Schema.Features[f];
                double sum = 0;
                for (int c = feature.FirstColumn; c < feature.FirstColumn + feature.ColumnCount; c++)
                    sum += columns[r * (int)encoded.shape[1] + c];
                Assert.Equal(sum, expected[r, f], 5);
            }
        }
    }

    [Fact]
    public void EveryBuiltInAttributionMethodIsBuiltByItsStoredNameAndSettings()
    {
        // Methods that attribute to a hidden layer (ILayerMethod, and neuron conductance for one unit) are given with the
        // layer they read (MonitorOptions.LayerMethods, the neurons command), not rebuilt from a feature map's name.
        var implementations = typeof(IAttributionMethod).Assembly.GetTypes()
            .Where(t => typeof(IAttributionMethod).IsAssignableFrom(t) && t.IsClass && !t.IsAbstract
                && !typeof(ILayerMethod).IsAssignableFrom(t) && t != typeof(NeuronConductance))
            .ToHashSet();
        var built = AttributionMethods.Names.Select(n => AttributionMethods.Create(n, ImmutableDictionary<string, string>.Empty)).ToList();

        Assert.Equal(implementations.OrderBy(t => t.Name), built.Select(m => m.GetType()).Distinct().OrderBy(t => t.Name));
        foreach (var method in built)
        {
            var again = AttributionMethods.Create(method.Name, method.Settings);
            Assert.Equal(method.GetType(), again.GetType());
            Assert.Equal(method.Name, again.Name);
            Assert.Equal(method.Settings, again.Settings);
        }
    }

    [Fact]
    public void EveryChartClassHasAKindTheCatalogueBuildsAndTheReportListsEveryKind()
    {
        var chartClasses = typeof(IChart).Assembly.GetTypes()
            .Where(t => typeof(IChart).IsAssignableFrom(t) && t.IsClass && !t.IsAbstract)
            .ToHashSet();
        var history = DemoHistory();
        var created = Enum.GetValues<ChartKind>().Select(k => ChartCatalog.Create(k, history, new ChartOptions()).GetType()).ToList();

        Assert.Equal(Enum.GetValues<ChartKind>(), ChartCatalog.All);
        // The neuron map is drawn from layer maps by the neurons command, not per run by the catalogue.
        Assert.Equal(chartClasses.Where(t => t != typeof(NeuronMapChart)).OrderBy(t => t.Name), created.Distinct().OrderBy(t => t.Name));
    }

    [Fact]
    public void EveryCommandClassIsAVerbOfTheCli()
    {
        var commandClasses = typeof(CliApp).Assembly.GetTypes()
            .Where(t => t.Name.EndsWith("Command", StringComparison.Ordinal) && t.IsAbstract && t.IsSealed
                && t.GetMethod("Create", BindingFlags.Public | BindingFlags.NonPublic | BindingFlags.Static) is not null)
            .Select(t => t.Name[..^"Command".Length].ToLowerInvariant())
            .Order(StringComparer.Ordinal)
            .ToList();
        var verbs = CliApp.Build().Subcommands.Select(c => c.Name).Order(StringComparer.Ordinal).ToList();

        Assert.NotEmpty(commandClasses);
        Assert.Equal(commandClasses, verbs);
    }

    [Fact]
    public void EveryExportTableAndColumnIsInTheJsonSchema()
    {
        using var schema = JsonDocument.Parse(File.ReadAllText(Path.Combine(ConventionTests.FindRepositoryRoot(), "src", "DriftWatch.Export", "export.schema.json")));
        var definitions = schema.RootElement.GetProperty("$defs");
        var tables = typeof(RunTables).GetProperties()
            .Where(p => p.PropertyType.IsGenericType && p.PropertyType.GetGenericTypeDefinition() == typeof(ImmutableArray<>) && p.PropertyType.GetGenericArguments()[0].Name.EndsWith("Row", StringComparison.Ordinal))
            .ToList();

        Assert.Equal(3, tables.Count);
        foreach (var table in tables)
        {
            string key = JsonNamingPolicy.SnakeCaseLower.ConvertName(table.Name);
            Assert.True(definitions.TryGetProperty(key, out var entry), $"the schema has no table '{key}'");
            var columns = entry.GetProperty("items").GetProperty("properties");
            var row = table.PropertyType.GetGenericArguments()[0];
            // A row's open set of values by name (an epoch's metrics) is flattened into columns: the fixed ones are named, the rest match metric_.
            foreach (var column in row.GetProperties())
            {
                var names = column.PropertyType == typeof(ImmutableDictionary<string, double?>)
                    ? RunTables.FixedMetrics.ToList()
                    : [JsonNamingPolicy.SnakeCaseLower.ConvertName(column.Name)];
                foreach (string name in names)
                    Assert.True(columns.TryGetProperty(name, out _), $"table '{key}' has no column '{name}' for {row.Name}.{column.Name}");
            }
        }
        Assert.Equal(RunExport.FindingColumns, definitions.GetProperty("findings").GetProperty("items").GetProperty("properties").EnumerateObject().Select(p => p.Name));
        Assert.Equal(RunExport.ImportanceColumns, definitions.GetProperty("importance").GetProperty("items").GetProperty("properties").EnumerateObject().Select(p => p.Name));
    }

    private static RunHistory DemoHistory()
    {
        using var temp = new TempFolder();
        string store = temp.File("built.litedb");
        new StoreBuilder().WithRun("built").WithLeakFinding(feature: 1, fromEpoch: 3).Build(store);
        using var reader = RunStore.OpenForReading(store);
        return RunHistory.Load(reader, "built");
    }
}
