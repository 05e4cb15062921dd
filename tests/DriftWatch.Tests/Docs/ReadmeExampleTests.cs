using DriftWatch.Attribution;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Docs;

// README:begin
public sealed class GradeNet : nn.Module<Tensor, Tensor, Tensor>, IWatchedModel
{
    private readonly nn.Module<Tensor, Tensor> _bay = nn.Embedding(12, 8);
    private readonly nn.Module<Tensor, Tensor> _body = nn.Sequential(nn.Linear(2 + 8, 32), nn.ReLU(), nn.Linear(32, 1));

    public GradeNet() : base("grade-net") => RegisterComponents();

    public FeatureSchema Schema { get; } = FeatureSchema.CreateBuilder()
        .AddDense("air temperature").AddDense("humidity").AddCategorical("greenhouse bay", 8).Build();

    public nn.Module Module => this;

    // Columns in schema order: the two dense values, then the bay's 8 embedding columns.
    public Tensor Encode(Tensor dense, Tensor categorical) => torch.cat([dense, _bay.call(categorical.select(1, 0))], 1);

    public Tensor Score(Tensor features) => _body.call(features);

    public override Tensor forward(Tensor dense, Tensor categorical) => Score(Encode(dense, categorical));
}
// README:end

public sealed class ReadmeExampleTests
{
    [Theory]
    [InlineData("ReadmeExampleTests.cs", "README.md")]
    [InlineData("ReadmeEntryExample.cs", "docs/embedding.md")]
    public void TheReadmeExampleIsTheCompiledOne(string file, string document)
    {
        string root = ConventionTests.FindRepositoryRoot();
        string source = File.ReadAllText(Path.Combine(root, "tests", "DriftWatch.Tests", "Docs", file));
        string readme = File.ReadAllText(Path.Combine(root, document));
        int begin = source.IndexOf("// README:begin", StringComparison.Ordinal);
        int end = source.IndexOf("// README:end", StringComparison.Ordinal);
        var lines = source[begin..end].Split('\n').Skip(1).Select(l => l.TrimEnd()).Where(l => l.Length > 0);

        Assert.All(lines, line => Assert.Contains(line, readme, StringComparison.Ordinal));
    }

    [Fact]
    public void TheReadmeLoopRunsAsWritten()
    {
        using var temp = new TempFolder();
        using var model = new GradeNet();
        var random = new Random(2);
        ProbeRows Rows(int n) => new(
            Enumerable.Range(0, n * 2).Select(_ => (float)random.NextDouble()).ToArray(), 2,
            Enumerable.Range(0, n).Select(_ => (long)random.Next(12)).ToArray(), 1,
            Enumerable.Range(0, n).Select(_ => (float)random.Next(2)).ToArray());
        var (validationRows, trainingRows) = (Rows(60), Rows(60));

        // As in the README:
        var probe = ProbeSet.Select(validationRows, trainingRows, perHalf: 128, seed: 1);
        using var monitor = new TrainingMonitor(new MonitorOptions
        {
            StorePath = temp.File("runs.litedb"),
            RunName = "grade-net-night-1",
            Schema = model.Schema,
            Probe = probe,
            Methods = [new IntegratedGradients(steps: 64)],
        });
        var verdict = monitor.EndEpoch(model, 1, new EpochMetrics(0.6, 0.65));

        Assert.False(verdict.IsHalt);
        Assert.Single(monitor.Store.Epochs(monitor.Run.Id));
    }

    [Fact]
    public void TheReadmeEntryExampleDeclaresAnEntryTheCheckAccepts()
    {
        using var model = new Entry.GradeNet();
        model.eval();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.rand(10, 2), torch.randint(12, [10, 1]));

        var input = AttributionInput.ForModel(model, AttributionTarget.Logit, features, torch.zeros(10), 2048, model.Schema);

        Assert.NotNull(input.Entry);
        Assert.Equal([32L, 10L], input.Entry.Weight.shape);
    }
}
