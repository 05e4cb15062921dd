using DriftWatch.Demo.Greenhouse;
using DriftWatch.Detection;
using DriftWatch.Hooks;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Demo;

/// <summary>One trained epoch as the loop saw it.</summary>
/// <param name="Epoch">Epoch number, from 1.</param>
/// <param name="TrainLoss">Mean training loss over the epoch's minibatches.</param>
/// <param name="ValidationLoss">Validation loss (BCE) at the end of the epoch.</param>
/// <param name="Accuracy">Validation accuracy at threshold 0.5.</param>
/// <param name="Verdict">The monitor's verdict.</param>
/// <param name="MonitorSeconds">Seconds the monitor took.</param>
public sealed record EpochRecord(int Epoch, double TrainLoss, double ValidationLoss, double Accuracy, Verdict Verdict, double MonitorSeconds);

/// <summary>The demo's training loop: Adam, minibatches of 32, BCE on the logit, the monitor called once per epoch.</summary>
public static class GreenhouseTrainer
{
    /// <summary>Adam's learning rate.</summary>
    public const double LearningRate = 1e-3;

    /// <summary>Minibatch size.</summary>
    public const int BatchSize = 32;

    /// <summary>Trains for up to <paramref name="epochs"/> epochs (from 1), calling the monitor after each.</summary>
    /// <param name="scenario">The generated data.</param>
    /// <param name="model">The model, freshly initialised.</param>
    /// <param name="monitor">The monitor to call each epoch.</param>
    /// <param name="epochs">Epochs to train.</param>
    /// <param name="seed">Seed of the minibatch order.</param>
    /// <param name="stopOnHalt">Stop after the first Halt verdict.</param>
    /// <param name="onEpoch">Called after each epoch, or null.</param>
    /// <param name="firstEpoch">The first epoch to train; above 1 for a resumed run whose model already holds the weights of the epoch before.</param>
    /// <param name="optimizerState">Where the optimizer's state is saved after every epoch and, for a resumed run, loaded from; null for none.</param>
    public static IReadOnlyList<EpochRecord> Train(
        GreenhouseScenario scenario,
        GreenhouseNet model,
        TrainingMonitor monitor,
        int epochs,
        int seed,
        bool stopOnHalt,
        Action<EpochRecord>? onEpoch = null,
        int firstEpoch = 1,
        OptimizerStateFiles? optimizerState = null)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(monitor);
        ArgumentOutOfRangeException.ThrowIfLessThan(firstEpoch, 1);
        using var data = new TrainingData(scenario);
        // Adam with every scalar of its step held until the native call returns (DriftWatch.Hooks.Optimizers.Adam says why).
        using var optimizer = new DriftWatch.Hooks.Optimizers.Adam(model.parameters(), LearningRate);
        var shuffle = new Random(seed);
        // A resumed run replays the data order of the epochs it skips, so each later epoch sees the minibatches an
        // uninterrupted run would; with the weights and the optimizer's state restored, it continues the same run.
        for (int skipped = 1; skipped < firstEpoch; skipped++)
            NextOrder(data.TrainingCount, shuffle);
        if (firstEpoch > 1)
            optimizerState?.TryLoad(optimizer, firstEpoch - 1);
        var records = new List<EpochRecord>();
        for (int epoch = firstEpoch; epoch <= epochs; epoch++)
        {
            double trainLoss = TrainOneEpoch(model, optimizer, data, shuffle);
            var (validationLoss, accuracy) = Evaluate(model, data);
            optimizerState?.Save(optimizer, epoch);
            var watch = System.Diagnostics.Stopwatch.StartNew();
            var verdict = monitor.EndEpoch(model, epoch, new EpochMetrics(trainLoss, validationLoss).With("validation_accuracy", accuracy));
            var record = new EpochRecord(epoch, trainLoss, validationLoss, accuracy, verdict, watch.Elapsed.TotalSeconds);
            records.Add(record);
            onEpoch?.Invoke(record);
            if (stopOnHalt && verdict.Kind == VerdictKind.Halt)
                break;
        }
        return records;
    }

    private static long[] NextOrder(int count, Random shuffle)
    {
        var order = new long[count];
        for (int i = 0; i < order.Length; i++)
            order[i] = i;
        shuffle.Shuffle(order);
        return order;
    }

    private static double TrainOneEpoch(GreenhouseNet model, optim.Optimizer optimizer, TrainingData data, Random shuffle)
    {
        model.train();
        var order = NextOrder(data.TrainingCount, shuffle);
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
        // Scalars held until their calls return; an implicit one can be finalized while native code reads it.
        using Scalar zero = 0f, half = 0.5f;
        var logits = model.call(data.ValidationDense, data.ValidationCategorical).squeeze(1);
        double loss = nn.functional.binary_cross_entropy_with_logits(logits, data.ValidationLabels).item<float>();
        double accuracy = logits.gt(zero).eq(data.ValidationLabels.gt(half)).to(ScalarType.Float32).mean().item<float>();
        return (loss, accuracy);
    }

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
