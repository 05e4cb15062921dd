using System.Diagnostics;
using System.Globalization;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using DriftWatch.Probing;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Demo;

/// <summary>Trains the greenhouse model with the monitor attached, one printed line per epoch.</summary>
internal static class GreenhouseTraining
{
    private const double LearningRate = 1e-3;
    private const int BatchSize = 32;
    private const int ValidationRows = 1000;

    /// <summary>Runs the demo and returns the process exit code.</summary>
    /// <exception cref="DriftWatchException">The store cannot be used, or the run name is taken.</exception>
    public static int Run(DemoOptions options, TextWriter output)
    {
        var total = Stopwatch.StartNew();
        var scenario = ScenarioBuilder.For(options.Variant)
            .WithSeed(options.Seed)
            .WithTrainingRows(options.Rows)
            .WithValidationRows(ValidationRows)
            .Build();

        torch.manual_seed(options.Seed);
        using var model = GreenhouseNet.For(scenario);
        var probe = ProbeSet.Select(scenario.Validation.Rows, scenario.Training.Rows, options.ProbePerHalf, options.Seed);
        var monitorOptions = new MonitorOptions
        {
            StorePath = Path.GetFullPath(options.StorePath),
            RunName = options.RunName,
            Schema = model.Schema,
            Probe = probe,
            Methods = [new Attribution.IntegratedGradients(options.Steps)],
            TrainingValueCounts = scenario.TrainingValueCounts,
            Description = string.Create(CultureInfo.InvariantCulture,
                $"DriftWatch demo, scenario {GreenhouseVariants.NameOf(options.Variant)}: {scenario.Describe()}. Model: embeddings {model.EmbeddingWidth} wide, MLP {model.Hidden}-{model.Hidden} ReLU, one logit; Adam lr {LearningRate}, batch {BatchSize}."),
        };

        using var monitor = new TrainingMonitor(monitorOptions);
        if (monitor.LastEpoch >= 0)
        {
            throw new DriftWatchException(
                $"run '{options.RunName}' already has epochs up to {monitor.LastEpoch} in '{monitorOptions.StorePath}'; pass --run NAME for a new run, or delete the store file to start over");
        }

        output.WriteLine($"scenario  {GreenhouseVariants.NameOf(options.Variant)}: {scenario.Describe()}");
        output.WriteLine(scenario.PlantedFaults.IsEmpty
            ? "planted   nothing that should be flagged"
            : $"planted   {string.Join(", ", scenario.PlantedFaults)} (should be flagged)");
        output.WriteLine(Invariant($"rule      a model that knew the grading rule would score validation loss {scenario.Validation.RuleLoss():F4}"));
        output.WriteLine(Invariant($"probe     {probe.HeldOutCount} held-out + {probe.TrainingCount} training rows, Integrated Gradients {options.Steps} steps; run '{options.RunName}'"));
        output.WriteLine();

        using var data = new TrainingData(scenario);
        using var optimizer = torch.optim.Adam(model.parameters(), lr: LearningRate);
        var shuffle = new Random(options.Seed);
        int bestEpoch = 0;
        double bestLoss = double.PositiveInfinity;
        int epoch = 1;
        for (; epoch <= options.Epochs; epoch++)
        {
            double trainLoss = TrainOneEpoch(model, optimizer, data, shuffle);
            var (validationLoss, accuracy) = Evaluate(model, data);
            if (validationLoss < bestLoss)
                (bestLoss, bestEpoch) = (validationLoss, epoch);

            var watch = Stopwatch.StartNew();
            var verdict = monitor.EndEpoch(model, epoch, new EpochMetrics(trainLoss, validationLoss).With("validation_accuracy", accuracy));
            output.WriteLine(Invariant(
                $"epoch {epoch,3}  train loss {trainLoss:F4}  validation loss {validationLoss:F4}  accuracy {accuracy:F3}  verdict {verdict.Kind,-8}  monitor {watch.Elapsed.TotalSeconds:F2} s"));
            foreach (var finding in verdict.Findings)
                output.WriteLine($"          {finding.Severity.ToString().ToLowerInvariant()}: {finding.Evidence}");
            if (verdict.Kind == VerdictKind.Halt)
            {
                output.WriteLine($"          the gate advises stopping; training stops at epoch {epoch}");
                break;
            }
        }

        output.WriteLine();
        output.WriteLine(Invariant($"lowest validation loss {bestLoss:F4} at epoch {bestEpoch}; {Math.Min(epoch, options.Epochs)} epochs in {total.Elapsed.TotalSeconds:F1} s"));
        string store = Quote(monitorOptions.StorePath);
        string run = Quote(options.RunName);
        output.WriteLine($"store     {monitorOptions.StorePath}");
        output.WriteLine("next      see what the monitor recorded:");
        output.WriteLine($"          dotnet run --project src/DriftWatch.Cli -- runs --store {store}");
        output.WriteLine($"          dotnet run --project src/DriftWatch.Cli -- show {run} --store {store}");
        output.WriteLine($"          dotnet run --project src/DriftWatch.Cli -- chart {run} --store {store}");
        return 0;
    }

    private static double TrainOneEpoch(GreenhouseNet model, optim.Optimizer optimizer, TrainingData data, Random shuffle)
    {
        model.train();
        var order = new long[data.TrainingCount];
        for (int i = 0; i < order.Length; i++)
            order[i] = i;
        shuffle.Shuffle(order);
        double sum = 0;
        for (int start = 0; start < order.Length; start += BatchSize)
        {
            using var scope = torch.NewDisposeScope();
            int count = Math.Min(BatchSize, order.Length - start);
            var index = torch.tensor(order[start..(start + count)]);
            var logits = model.call(data.TrainingDense.index_select(0, index), data.TrainingCategorical.index_select(0, index)).squeeze(1);
            var loss = nn.functional.binary_cross_entropy_with_logits(logits, data.TrainingLabels.index_select(0, index));
            optimizer.zero_grad();
            loss.backward();
            optimizer.step();
            sum += loss.item<float>() * count;
        }
        return sum / order.Length;
    }

    private static (double Loss, double Accuracy) Evaluate(GreenhouseNet model, TrainingData data)
    {
        model.eval();
        using var scope = torch.NewDisposeScope();
        using var noGrad = torch.no_grad();
        var logits = model.call(data.ValidationDense, data.ValidationCategorical).squeeze(1);
        double loss = nn.functional.binary_cross_entropy_with_logits(logits, data.ValidationLabels).item<float>();
        double accuracy = (logits > 0).eq(data.ValidationLabels > 0.5f).to(ScalarType.Float32).mean().item<float>();
        return (loss, accuracy);
    }

    private static string Invariant(FormattableString text) => text.ToString(CultureInfo.InvariantCulture);

    // Paths and run names are printed as commands to copy; quote them for a POSIX shell when they need it.
    private static string Quote(string text) =>
        text.Length > 0 && text.All(c => char.IsAsciiLetterOrDigit(c) || "-_./:=+,@".Contains(c, StringComparison.Ordinal))
            ? text
            : "'" + text.Replace("'", "'\\''", StringComparison.Ordinal) + "'";

    /// <summary>Both sets as tensors, built once and owned for the whole run.</summary>
    private sealed class TrainingData : IDisposable
    {
        public TrainingData(GreenhouseScenario scenario)
        {
            var t = scenario.Training.Rows;
            var v = scenario.Validation.Rows;
            TrainingCount = t.Count;
            TrainingDense = torch.tensor(t.Dense, [t.Count, t.DenseCount]);
            TrainingCategorical = torch.tensor(t.Categorical, [t.Count, t.CategoricalCount]);
            TrainingLabels = torch.tensor(t.Labels!);
            ValidationDense = torch.tensor(v.Dense, [v.Count, v.DenseCount]);
            ValidationCategorical = torch.tensor(v.Categorical, [v.Count, v.CategoricalCount]);
            ValidationLabels = torch.tensor(v.Labels!);
        }

        public int TrainingCount { get; }

        public Tensor TrainingDense { get; }

        public Tensor TrainingCategorical { get; }

        public Tensor TrainingLabels { get; }

        public Tensor ValidationDense { get; }

        public Tensor ValidationCategorical { get; }

        public Tensor ValidationLabels { get; }

        public void Dispose()
        {
            TrainingDense.Dispose();
            TrainingCategorical.Dispose();
            TrainingLabels.Dispose();
            ValidationDense.Dispose();
            ValidationCategorical.Dispose();
            ValidationLabels.Dispose();
        }
    }
}
