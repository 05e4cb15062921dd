using System.Collections.Immutable;
using System.Globalization;
using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Detection;

// Real data: Fisher's Iris (Fisher 1936; CSV copy with provenance in Data/iris.PROVENANCE.md), as "virginica or not"
// and as its three species.
public sealed class IrisTests
{
    private static readonly string[] Measurements = ["sepal length", "sepal width", "petal length", "petal width"];

    private sealed record Iris(float[] Values, bool Virginica, int Species);

    private static readonly string[] SpeciesNames = ["setosa", "versicolor", "virginica"];

    private static List<Iris> Load()
    {
        string path = Path.Combine(AppContext.BaseDirectory, "Data", "iris.csv");
        return File.ReadAllLines(path).Skip(1).Where(l => l.Length > 0).Select(line =>
        {
            var cells = line.Split(',');
            return new Iris(cells.Take(4).Select(c => float.Parse(c, CultureInfo.InvariantCulture)).ToArray(), cells[4] == "virginica", Array.IndexOf(SpeciesNames, cells[4]));
        }).ToList();
    }

    private sealed class IrisNet : nn.Module<Tensor, Tensor, Tensor>, IWatchedModel
    {
        private readonly nn.Module<Tensor, Tensor>? _tag;
        private readonly nn.Module<Tensor, Tensor> _body;

        public IrisNet(bool withTag, int outputs = 1)
            : base("iris-net")
        {
            torch.manual_seed(3);
            var schema = FeatureSchema.CreateBuilder();
            foreach (var name in Measurements)
                schema.AddDense(name);
            if (withTag)
            {
                _tag = nn.Embedding(10, 4);
                schema.AddCategorical("sorting tag", 4);
            }
            Schema = schema.Build();
            _body = nn.Sequential(nn.Linear(Schema.ColumnCount, 32), nn.ReLU(), nn.Linear(32, 32), nn.ReLU(), nn.Linear(32, outputs));
            RegisterComponents();
        }

        public FeatureSchema Schema { get; }

        public nn.Module Module => this;

        public Tensor Encode(Tensor dense, Tensor categorical) =>
            _tag is null ? dense : torch.cat([dense, _tag.call(categorical.select(1, 0))], 1);

        public Tensor Score(Tensor features) => _body.call(features);

        public override Tensor forward(Tensor dense, Tensor categorical) => Score(Encode(dense, categorical));
    }

    // Seeded split: 100 training and 50 held-out flowers, species kept in proportion. The optional 'sorting tag' is a
    // 10-level id whose value gives the label away in 90% of training rows and is random in held-out rows (for the three
    // species: tags 0–2, 3–5 and 6–8 per species; 9 never leaks).
    private static (ProbeRows Training, ProbeRows HeldOut) Split(bool withTag, bool species = false)
    {
        var data = Load();
        var random = new Random(5);
        var order = data.Select((d, i) => (d, i)).OrderBy(_ => random.Next()).ToList();
        var held = order.GroupBy(x => x.i / 50).SelectMany(g => g.Take(17)).Select(x => x.i).Take(50).ToHashSet();
        var means = Enumerable.Range(0, 4).Select(c => data.Average(d => d.Values[c])).ToArray();
        var sds = Enumerable.Range(0, 4).Select(c => Math.Sqrt(data.Average(d => Math.Pow(d.Values[c] - means[c], 2)))).ToArray();
        ProbeRows Rows(IEnumerable<int> indices, bool training)
        {
            var list = indices.ToList();
            var dense = list.SelectMany(i => data[i].Values.Select((v, c) => (float)((v - means[c]) / sds[c]))).ToArray();
            var labels = list.Select(i => species ? data[i].Species : data[i].Virginica ? 1f : 0f).ToArray();
            var tags = list.Select((i, k) =>
            {
                bool leaks = training && random.NextDouble() < 0.9;
                return !leaks ? random.Next(10)
                    : species ? (long)(3 * labels[k] + random.Next(3))
                    : (long)(labels[k] > 0 ? random.Next(5) : 5 + random.Next(5));
            }).ToArray();
            return new ProbeRows(dense, 4, withTag ? tags : [], withTag ? 1 : 0, labels);
        }
        var trainingRows = Enumerable.Range(0, 150).Where(i => !held.Contains(i));
        return (Rows(trainingRows, training: true), Rows(held.Order(), training: false));
    }

    private static List<Verdict> Train(bool withTag, string store, out MonitoredRun run, bool species = false)
    {
        var (training, heldOut) = Split(withTag, species);
        using var model = new IrisNet(withTag, species ? 3 : 1);
        var optimizer = new DriftWatch.Hooks.Optimizers.Adam(model.parameters(), 0.01); // TorchSharp's Adam, its scalars held (DriftWatch.Hooks)
        var verdicts = new List<Verdict>();
        using var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = store,
            RunName = (withTag ? "iris-tagged" : "iris") + (species ? "-species" : ""),
            Schema = model.Schema,
            Probe = new ProbeSet(heldOut, training),
            Methods = [new IntegratedGradients(32)],
            TrainingValueCounts = withTag
                ? new Dictionary<string, ImmutableDictionary<long, int>>
                {
                    ["sorting tag"] = training.Categorical.GroupBy(v => v).ToDictionary(g => g.Key, g => g.Count()).ToImmutableDictionary(),
                }.ToImmutableDictionary()
                : ImmutableDictionary<string, ImmutableDictionary<long, int>>.Empty,
            Strict = true,
        });
        Tensor Dense(ProbeRows rows) => torch.tensor(rows.Dense, [rows.Count, 4]);
        Tensor Cats(ProbeRows rows) => torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount]);
        Tensor Loss(ProbeRows rows) => species
            ? nn.functional.cross_entropy(model.call(Dense(rows), Cats(rows)), torch.tensor(rows.Labels!.Select(l => (long)l).ToArray()))
            : nn.functional.binary_cross_entropy_with_logits(model.call(Dense(rows), Cats(rows)).squeeze(1), torch.tensor(rows.Labels!));
        for (int epoch = 1; epoch <= 40; epoch++)
        {
            double trainLoss, validationLoss;
            using (var scope = torch.NewDisposeScope())
            {
                model.train();
                for (int step = 0; step < 5; step++)
                {
                    optimizer.zero_grad();
                    var loss = Loss(training);
                    loss.backward();
                    optimizer.step();
                }
                model.eval();
                using var noGrad = torch.no_grad();
                trainLoss = Loss(training).item<float>();
                validationLoss = Loss(heldOut).item<float>();
            }
            verdicts.Add(monitor.EndEpoch(model, epoch, new EpochMetrics(trainLoss, validationLoss)));
        }
        run = monitor.Run;
        return verdicts;
    }

    [Fact]
    public void TheCopiedDataIsFishersIris()
    {
        // Fisher 1936: 150 flowers, 50 per species; sepal length mean 5.843 cm, petal length mean 3.758 cm (from memory).
        var data = Load();
        Assert.Equal(150, data.Count);
        Assert.Equal(50, data.Count(d => d.Virginica));
        Assert.Equal(5.843, data.Average(d => d.Values[0]), 3);
        Assert.Equal(3.758, data.Average(d => d.Values[2]), 3);
    }

    [Fact]
    public void PetalMeasurementsOutrankSepalMeasurements()
    {
        // Well known from the data (from memory): petal length and width separate the species far better than sepal measurements.
        using var temp = new TempFolder();
        Train(withTag: false, temp.File("iris.litedb"), out var run);

        using var store = RunStore.OpenForReading(temp.File("iris.litedb"));
        var share = store.Maps(run.Id)[^1].HeldOut.Share;
        Assert.True(Math.Min(share[2], share[3]) > Math.Max(share[0], share[1]), "held-out shares: " + string.Join(", ", share.Select(s => s.ToString("0.000", CultureInfo.InvariantCulture))));
    }

    [Fact]
    public void ATagThatLeaksTheLabelInTrainingRowsIsFlaggedAndNothingElse()
    {
        using var temp = new TempFolder();
        var verdicts = Train(withTag: true, temp.File("iris.litedb"), out _);

        var flagged = verdicts.SelectMany(v => v.Findings).Where(f => f.Feature.Length > 0).ToList();
        Assert.Contains(flagged, f => f.Feature == "sorting tag" && (f.Kind == FindingKind.Leak || f.Kind == FindingKind.MemorisedIdentifier));
        Assert.All(flagged, f => Assert.Equal("sorting tag", f.Feature));
        Assert.Contains(verdicts, v => v.Kind == VerdictKind.Halt);
    }

    [Fact]
    public void ATagThatLeaksTheSpeciesInTrainingRowsIsNamedWithEachRowAttributedTowardsItsOwnSpecies()
    {
        // Three classes (setosa, versicolor, virginica), one output per species; the monitor's default target for class
        // labels attributes each flower towards its own species, so the label rules read the tag's alignment.
        using var temp = new TempFolder();
        var verdicts = Train(withTag: true, temp.File("iris.litedb"), out var run, species: true);

        using (var store = RunStore.OpenForReading(temp.File("iris.litedb")))
            Assert.Equal("true class", store.GetRun(run.Name).Target);
        Assert.DoesNotContain(verdicts.SelectMany(v => v.Reasons), r => r.StartsWith("not checked:", StringComparison.Ordinal));
        var flagged = verdicts.SelectMany(v => v.Findings).Where(f => f.Feature.Length > 0).ToList();
        Assert.Contains(flagged, f => f.Feature == "sorting tag" && (f.Kind == FindingKind.Leak || f.Kind == FindingKind.MemorisedIdentifier));
        Assert.All(flagged, f => Assert.Equal("sorting tag", f.Feature));
        Assert.Contains(verdicts, v => v.Kind == VerdictKind.Halt);
    }
}
