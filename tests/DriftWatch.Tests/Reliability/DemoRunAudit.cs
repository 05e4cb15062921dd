using System.Globalization;
using System.Security.Cryptography;
using DriftWatch.Attribution;
using DriftWatch.Demo;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Storage;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Reliability;

/// <summary>What one audit of a store found.</summary>
/// <param name="StoreExists">Whether the store file existed.</param>
/// <param name="RunExists">Whether the run was registered.</param>
/// <param name="LastEpoch">The last complete epoch, 0 when none.</param>
/// <param name="PartialEpoch">Maps or a snapshot of the epoch after the last complete one were stored without its epoch document (a kill inside EndEpoch's writes).</param>
/// <param name="LogLeft">LiteDB's write-ahead log file was left beside the store.</param>
internal sealed record AuditOutcome(bool StoreExists, bool RunExists, int LastEpoch, bool PartialEpoch, bool LogLeft);

/// <summary>
/// Checks a demo run's store the way a person resuming after a crash would need it: it opens for reading, every epoch
/// the demo reported is there exactly once with its map, statistics, verdict and snapshot, the snapshot reproduces the
/// stored validation loss and attribution map, and an epoch once complete never changes afterwards.
/// </summary>
internal sealed class DemoRunAudit
{
    private readonly string _storePath;
    private readonly string _runName;
    private readonly int _steps;
    private readonly GreenhouseScenario _scenario;
    private readonly ProbeSet _probe;
    private readonly Dictionary<int, string> _fingerprints = [];
    private readonly SortedSet<int> _reported = [];

    public DemoRunAudit(string storePath, string runName, GreenhouseVariant variant, int seed, int rows, int probePerHalf, int steps)
    {
        _storePath = storePath;
        _runName = runName;
        _steps = steps;
        // The same scenario and probe set the demo builds from the same options (GreenhouseTraining.Run).
        _scenario = ScenarioBuilder.For(variant).WithSeed(seed).WithTrainingRows(rows).WithValidationRows(GreenhouseTraining.ValidationRows).Build();
        _probe = ProbeSet.Select(_scenario.Validation.Rows, _scenario.Training.Rows, probePerHalf, seed);
    }

    /// <summary>Epochs whose snapshot was loaded and shown to reproduce the stored metrics and map.</summary>
    public int EpochsReproduced { get; private set; }

    /// <summary>Checks of an earlier verified epoch against its fingerprint.</summary>
    public int EpochsRechecked { get; private set; }

    /// <summary>Every epoch number a process of this run has printed so far.</summary>
    public IReadOnlyCollection<int> Reported => _reported;

    /// <summary>Audits the store after a process ended; <paramref name="printed"/> are the epochs that process reported complete.</summary>
    public AuditOutcome Check(IEnumerable<int> printed, List<string> problems)
    {
        _reported.UnionWith(printed);
        bool logLeft = File.Exists(LogFileOf(_storePath));
        if (!File.Exists(_storePath))
        {
            if (_reported.Count > 0)
                problems.Add($"store '{_storePath}' is gone although epochs {string.Join(",", _reported)} were reported");
            return new AuditOutcome(false, false, 0, false, logLeft);
        }

        RunStore store;
        try
        {
            store = RunStore.OpenForReading(_storePath);
        }
        catch (DriftWatchException e)
        {
            problems.Add($"store did not open for reading: {e.Message}");
            return new AuditOutcome(true, false, 0, false, logLeft);
        }

        using (store)
        {
            var run = store.FindRun(_runName);
            if (run is null)
            {
                if (_reported.Count > 0)
                    problems.Add($"run '{_runName}' is missing although epochs {string.Join(",", _reported)} were reported");
                return new AuditOutcome(true, false, 0, false, logLeft);
            }
            if (store.Runs().Count(r => r.Name == _runName) != 1)
                problems.Add($"run '{_runName}' is registered more than once");
            if (run.ProbeHash != _probe.Hash)
                problems.Add($"run '{_runName}' records probe hash {run.ProbeHash}, the demo's probe set has {_probe.Hash}");

            var epochs = store.Epochs(run.Id);
            var numbers = epochs.Select(e => e.Epoch).ToList();
            int last = numbers.Count == 0 ? 0 : numbers[^1];
            if (!numbers.SequenceEqual(Enumerable.Range(1, numbers.Count)))
                problems.Add($"stored epochs are not 1..{numbers.Count} each once: {string.Join(",", numbers)}");
            var lost = _reported.Where(e => !numbers.Contains(e)).ToList();
            if (lost.Count > 0)
                problems.Add($"epochs {string.Join(",", lost)} were reported complete but are not in the store");
            int reportedLast = _reported.Count == 0 ? 0 : _reported.Max;
            if (last > reportedLast + 1)
                problems.Add($"the store holds epochs up to {last} but only {reportedLast} was reported; at most one epoch may be stored unreported");

            var maps = store.Maps(run.Id).ToLookup(m => m.Epoch);
            var verdicts = store.Verdicts(run.Id).ToLookup(v => v.Epoch);
            var statistics = store.StatisticsOf(run.Id).ToLookup(s => s.Epoch);
            foreach (var epoch in epochs)
            {
                var map = maps[epoch.Epoch].ToList();
                if (map.Count != 1 || verdicts[epoch.Epoch].Count() != 1 || statistics[epoch.Epoch].Count() != 1)
                {
                    problems.Add($"epoch {epoch.Epoch}: {map.Count} maps, {verdicts[epoch.Epoch].Count()} verdicts, {statistics[epoch.Epoch].Count()} statistics; expected one each");
                    continue;
                }
                if (epoch.SnapshotId is null)
                {
                    problems.Add($"epoch {epoch.Epoch} has no snapshot: {string.Join("; ", epoch.Problems)}");
                    continue;
                }
                if (epoch.Problems.Count > 0)
                    problems.Add($"epoch {epoch.Epoch} recorded monitoring problems: {string.Join("; ", epoch.Problems)}");
                byte[] snapshot = store.ReadSnapshot(epoch.SnapshotId).ToArray();
                string fingerprint = Fingerprint(epoch, map[0], verdicts[epoch.Epoch].Single(), snapshot);
                if (_fingerprints.TryGetValue(epoch.Epoch, out string? earlier))
                {
                    EpochsRechecked++;
                    if (earlier != fingerprint)
                        problems.Add($"epoch {epoch.Epoch} changed after it was complete");
                    continue;
                }
                Reproduce(epoch, map[0], snapshot, problems);
                _fingerprints[epoch.Epoch] = fingerprint;
                EpochsReproduced++;
            }

            bool partial = HasPartialEpoch(store, run.Id, last + 1);
            return new AuditOutcome(true, true, last, partial, logLeft);
        }
    }

    // LiteDB 5 keeps its write-ahead log in NAME-log.EXT beside the data file.
    public static string LogFileOf(string storePath) =>
        Path.Combine(Path.GetDirectoryName(storePath)!, Path.GetFileNameWithoutExtension(storePath) + "-log" + Path.GetExtension(storePath));

    private static bool HasPartialEpoch(RunStore store, int runId, int epoch)
    {
        try
        {
            store.ReadSnapshot($"snapshots/{runId}/{epoch.ToString("D6", CultureInfo.InvariantCulture)}").Dispose();
            return true;
        }
        catch (StoreException)
        {
            return false;
        }
    }

    private static string Fingerprint(EpochDocument epoch, MapDocument map, VerdictDocument verdict, byte[] snapshot)
    {
        using var hash = IncrementalHash.CreateHash(HashAlgorithmName.SHA256);
        hash.AppendData(snapshot);
        hash.AppendData(map.Scores);
        hash.AppendData(System.Text.Encoding.UTF8.GetBytes(string.Join(";", epoch.Metrics.OrderBy(m => m.Key, StringComparer.Ordinal).Select(m => m.Key + "=" + m.Value.ToString("R", CultureInfo.InvariantCulture)))));
        hash.AppendData(System.Text.Encoding.UTF8.GetBytes(verdict.Kind + string.Join(";", verdict.Reasons)));
        return Convert.ToHexString(hash.GetHashAndReset());
    }

    // The snapshot, loaded into a fresh model, must give back what the demo measured and what the monitor stored.
    private void Reproduce(EpochDocument epoch, MapDocument stored, byte[] snapshot, List<string> problems)
    {
        using var model = GreenhouseNet.For(_scenario);
        using (var weights = new MemoryStream(snapshot))
            model.load(weights);
        model.eval();
        using var scope = torch.NewDisposeScope();

        var v = _scenario.Validation.Rows;
        double loss;
        using (torch.no_grad())
        {
            var logits = model.call(torch.tensor(v.Dense, [v.Count, v.DenseCount]), torch.tensor(v.Categorical, [v.Count, v.CategoricalCount])).squeeze(1);
            loss = nn.functional.binary_cross_entropy_with_logits(logits, torch.tensor(v.Labels!)).item<float>();
        }
        double storedLoss = epoch.Metrics[EpochMetrics.ValidationLossKey];
        if (Math.Abs(loss - storedLoss) > 1e-6)
            problems.Add(string.Create(CultureInfo.InvariantCulture, $"epoch {epoch.Epoch}: its snapshot gives validation loss {loss:R}, the store says {storedLoss:R}"));

        Tensor features;
        using (torch.no_grad())
        {
            var p = _probe.Rows;
            features = model.Encode(torch.tensor(p.Dense, [p.Count, p.DenseCount]), torch.tensor(p.Categorical, [p.Count, p.CategoricalCount])).detach();
        }
        var baseline = Baseline.Zero.Resolve(features[TensorIndex.Slice(_probe.HeldOutCount, _probe.Count)], model.Schema.ColumnCount);
        // Built exactly as the monitor builds it (its default blocks, through the demo model's declared entry layer):
        // another route or block size gives the same map only up to float rounding, which the tolerance below is too
        // tight for on near-zero scores.
        var columns = new IntegratedGradients(_steps).Attribute(AttributionInput.ForModel(model, AttributionTarget.Logit, features, baseline, AttributionInput.DefaultChunkRows, model.Schema));
        var expected = AttributionMap.FromColumns(columns, model.Schema).Scores;
        var read = FloatBytes.ToFloats(stored.Scores);
        if (read.Length != expected.Length)
        {
            problems.Add($"epoch {epoch.Epoch}: stored map has {read.Length} scores, recomputing gives {expected.Length}");
            return;
        }
        double worst = 0;
        for (int i = 0; i < read.Length; i++)
            worst = Math.Max(worst, Math.Abs(read[i] - expected[i]) / Math.Max(1e-3, Math.Abs(expected[i])));
        if (worst > 1e-4)
            problems.Add(string.Create(CultureInfo.InvariantCulture, $"epoch {epoch.Epoch}: the stored map differs from the map its snapshot gives by up to {worst:G3} (relative)"));
    }
}
