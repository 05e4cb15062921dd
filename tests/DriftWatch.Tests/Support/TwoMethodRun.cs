using System.Globalization;
using DriftWatch.Attribution;
using DriftWatch.Detection;
using DriftWatch.Storage;
using DriftWatch.Tests.Detection;

namespace DriftWatch.Tests.Support;

/// <summary>
/// Writes a run with two methods straight into a store, without training: the first method's maps (from
/// <see cref="HistoryBuilder"/>) are stable, the second's show a leak in 'humidity' from epoch 2; verdicts come from the
/// <see cref="CrossMethodDetector"/>, as the monitor would store them. Each map gets a trust document with the two maps'
/// agreement and invented quality figures (relative infidelity 0.01 × (epoch + 1) for the first method, 0.5 + 0.1 × epoch
/// for the second; relative max-sensitivity 0.2 and 0.4).
/// </summary>
internal sealed class TwoMethodRun
{
    public const string Primary = "integrated-gradients";

    public string RunName { get; init; } = "two-methods";

    public string Second { get; init; } = "smoothgrad";

    public int Epochs { get; init; } = 5;

    public RunDocument Build(string path)
    {
        var primary = new HistoryBuilder().WithSeed(3);
        var second = new HistoryBuilder().WithSeed(4).WithLeak(1, fromEpoch: 2);
        var schema = primary.Schema;
        int rows = primary.Rows;
        var labels = primary.Labels;
        using var store = RunStore.OpenForWriting(path);
        var run = store.AddRun(new RunDocument
        {
            Name = RunName,
            CreatedUtc = new DateTime(2026, 1, 2, 3, 4, 0, DateTimeKind.Utc),
            Description = "built by TwoMethodRun: invented scores",
            Features = [.. schema.Features.Select(f => new FeatureDocument { Name = f.Name, Kind = f.Kind.ToString(), FirstColumn = f.FirstColumn, ColumnCount = f.ColumnCount })],
            ProbeHash = "0123456789abcdef",
            HeldOutRows = rows / 2,
            TrainingRows = rows / 2,
            DenseCount = schema.DenseCount,
            CategoricalCount = schema.CategoricalCount,
            ProbeDense = FloatBytes.FromFloats(new float[rows * schema.DenseCount]),
            ProbeCategorical = FloatBytes.FromLongs(primary.Categorical),
            ProbeLabels = FloatBytes.FromFloats(labels),
            Methods = [new MethodDocument { Name = Primary }, new MethodDocument { Name = Second }],
            Target = "logit",
            Baseline = "zero",
            Policy = GatePolicy.Default.ToJson(),
            TrainingValueCounts = new()
            {
                ["crate id"] = Enumerable.Range(0, 700).ToDictionary(v => v.ToString(CultureInfo.InvariantCulture), _ => 1),
                ["tray"] = Enumerable.Range(0, 4).ToDictionary(v => v.ToString(CultureInfo.InvariantCulture), _ => 200),
            },
        });
        var detector = new CrossMethodDetector(RunContext.FromRun(run), GatePolicy.Default, [Primary, Second]);
        int[] heldOut = [.. Enumerable.Range(0, rows / 2)];
        int[] training = [.. Enumerable.Range(rows / 2, rows / 2)];
        for (int epoch = 0; epoch < Epochs; epoch++)
        {
            var evidence = primary.Epoch(epoch);
            var maps = new Dictionary<string, AttributionMap> { [Primary] = evidence.Map!, [Second] = second.Epoch(epoch).Map! };
            var assessment = detector.Observe(evidence, maps);
            double rho = MethodAgreement.Spearman(maps[Primary], maps[Second], rows / 2);
            foreach (var (method, map) in maps)
            {
                store.WriteMap(new MapDocument
                {
                    RunId = run.Id,
                    Epoch = epoch,
                    Method = method,
                    Target = "logit",
                    Rows = rows,
                    Features = schema.Count,
                    Scores = FloatBytes.FromFloats(map.Scores),
                    HeldOut = Document(HalfImportance.Compute(map, heldOut, labels)),
                    Training = Document(HalfImportance.Compute(map, training, labels)),
                });
                bool first = method == Primary;
                store.WriteQuality(new MapQualityDocument
                {
                    RunId = run.Id,
                    Epoch = epoch,
                    Method = method,
                    Target = "logit",
                    Agreement = [new AgreementDocument { Method = first ? Second : Primary, Spearman = rho }],
                    Measured = true,
                    RelativeInfidelity = first ? 0.01 * (epoch + 1) : 0.5 + 0.1 * epoch,
                    Infidelity = first ? 0.02 * (epoch + 1) : 1 + 0.2 * epoch,
                    RelativeMaxSensitivity = first ? 0.2 : 0.4,
                    MaxSensitivity = first ? 0.3 : 0.6,
                    QualityRows = 16,
                });
            }
            store.WriteStatistics(new StatisticsDocument { RunId = run.Id, Epoch = epoch, Statistics = assessment.Statistics });
            store.WriteVerdict(VerdictDocuments.ToDocument(assessment.Verdict, run.Id));
            store.WriteEpoch(new EpochDocument
            {
                RunId = run.Id,
                Epoch = epoch,
                Metrics = new(evidence.Metrics),
                RecordedUtc = new DateTime(2026, 1, 2, 4, 0, 0, DateTimeKind.Utc).AddMinutes(epoch),
            });
        }
        return run;
    }

    private static ImportanceDocument Document(HalfImportance half) => ImportanceDocuments.From(half);
}
