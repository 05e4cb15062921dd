using System.Globalization;

namespace DriftWatch.Storage;

/// <summary>What kind of file an epoch's snapshot is.</summary>
public enum SnapshotFormat
{
    /// <summary>A TorchSharp weights file (a module's <c>save</c> format), stored in the run store: load it with <c>module.load(path)</c>.</summary>
    Weights,

    /// <summary>A TorchScript file a <c>follow</c> run keeps in its run folder: load it with <c>torch.jit.load</c> (Python or TorchSharp).</summary>
    TorchScript,
}

/// <summary>The snapshot chosen for an epoch of a run.</summary>
/// <param name="Run">The run's name.</param>
/// <param name="Epoch">The epoch.</param>
/// <param name="Format">A weights file from the store or a TorchScript file from the run folder.</param>
/// <param name="ValidationLoss">The epoch's validation loss, or null when the loop reported none.</param>
/// <param name="Why">How the epoch was chosen, e.g. <c>lowest validation loss</c>, <c>latest with a snapshot</c> or <c>asked for</c>.</param>
public sealed record SnapshotChoice(string Run, int Epoch, SnapshotFormat Format, double? ValidationLoss, string Why)
{
    /// <summary>Where the snapshot is read from: its file id in the store, or the TorchScript file's path.</summary>
    public string Source { get; init; } = "";
}

/// <summary>
/// Gets a run's weight snapshots back out of the store: the snapshot of a chosen epoch (<c>best</c>, <c>last</c> or a number)
/// as a TorchSharp weights file, or, for a run followed from a Python loop, its TorchScript file.
/// </summary>
/// <remarks>
/// The weights file is the module's own <c>save</c> format: <c>model.load(path)</c> on a model of the run's architecture gives back
/// the weights of that epoch exactly. The store is only read.
/// </remarks>
public static class RunSnapshots
{
    /// <summary>The <c>--epoch</c> word for the epoch of the lowest validation loss that has a snapshot.</summary>
    public const string Best = "best";

    /// <summary>The <c>--epoch</c> word for the latest epoch that has a snapshot.</summary>
    public const string Last = "last";

    private const string FollowedPrefix = "followed from ";
    private const string FollowedSuffix = " (TorchScript snapshots stay there)";

    /// <summary>
    /// Chooses the snapshot <paramref name="epoch"/> names: <c>best</c> (lowest finite validation loss among the epochs with a
    /// snapshot; the earlier epoch on a tie), <c>last</c> (the latest epoch with a snapshot) or an epoch number.
    /// </summary>
    /// <param name="store">The store.</param>
    /// <param name="runName">The run.</param>
    /// <param name="epoch"><c>best</c>, <c>last</c> or an epoch number.</param>
    /// <param name="folder">For a followed run, its run folder when it has moved since; null to use the folder the store recorded.</param>
    /// <exception cref="StoreException">No such run.</exception>
    /// <exception cref="DriftWatchException">
    /// The epoch is not <c>best</c>, <c>last</c> or a stored epoch; it has no snapshot; the run kept no snapshots; or <c>best</c>
    /// is asked of a run without validation losses.
    /// </exception>
    public static SnapshotChoice Choose(RunStore store, string runName, string epoch, string? folder = null)
    {
        ArgumentNullException.ThrowIfNull(store);
        ArgumentNullException.ThrowIfNull(runName);
        ArgumentNullException.ThrowIfNull(epoch);
        var run = store.GetRun(runName);
        var epochs = store.Epochs(run.Id);
        string? scripts = folder ?? FollowedFolder(run.Description);
        bool stored = epochs.Any(e => e.SnapshotId is not null);
        var format = stored || scripts is null ? SnapshotFormat.Weights : SnapshotFormat.TorchScript;
        string? SourceOf(EpochDocument e) => format == SnapshotFormat.Weights
            ? e.SnapshotId
            : Path.Combine(scripts!, TorchScriptFile(e.Epoch)) is var file && File.Exists(file) ? file : null;
        var candidates = epochs.Select(e => (Epoch: e, Source: SourceOf(e))).ToList();
        var with = candidates.Where(c => c.Source is not null).ToList();
        string name = run.Name;
        if (epochs.Count == 0)
            throw new DriftWatchException($"run '{name}' has no complete epoch yet, so there is no snapshot to write");
        if (with.Count == 0)
        {
            throw new DriftWatchException(format == SnapshotFormat.TorchScript
                ? $"run '{name}' was followed from '{scripts}', but no epoch's TorchScript file ({TorchScriptFile(epochs[^1].Epoch)}, …) is there; pass --folder with the run folder's new place"
                : $"run '{name}' kept no weight snapshots (the monitor ran with SaveSnapshots off, or every snapshot failed); nothing to write");
        }

        (EpochDocument Epoch, string? Source) pick;
        string why;
        string text = epoch.Trim().ToLowerInvariant();
        if (text == Best)
        {
            var losses = with.Where(c => ValidationLoss(c.Epoch) is not null).ToList();
            if (losses.Count == 0)
                throw new DriftWatchException($"run '{name}' stored no validation loss, so it has no best epoch; pass --epoch last or an epoch number ({Range(with)})");
            pick = losses.OrderBy(c => ValidationLoss(c.Epoch)!.Value).ThenBy(c => c.Epoch.Epoch).First();
            why = "lowest validation loss";
        }
        else if (text == Last)
        {
            pick = with[^1];
            why = "latest with a snapshot";
        }
        else if (int.TryParse(text, NumberStyles.None, CultureInfo.InvariantCulture, out int number))
        {
            pick = candidates.FirstOrDefault(c => c.Epoch.Epoch == number);
            if (pick.Epoch is null)
                throw new DriftWatchException($"run '{name}' has no stored epoch {number}; its epochs with a snapshot: {Range(with)}");
            if (pick.Source is null)
                throw new DriftWatchException($"epoch {number} of run '{name}' has no snapshot; epochs with one: {Range(with)}");
            why = "asked for";
        }
        else
        {
            throw new DriftWatchException($"--epoch must be best, last or an epoch number; got '{epoch}'");
        }
        return new SnapshotChoice(name, pick.Epoch.Epoch, format, ValidationLoss(pick.Epoch), why) { Source = pick.Source! };
    }

    /// <summary>
    /// Writes the snapshot <paramref name="epoch"/> names (see <see cref="Choose"/>) to <paramref name="path"/>, replacing a file
    /// there: a TorchSharp weights file, or a followed run's TorchScript file, byte for byte as it was kept.
    /// </summary>
    /// <exception cref="StoreException">No such run, or the store lost the snapshot's bytes.</exception>
    /// <exception cref="DriftWatchException">A bad epoch, no snapshot, or a file that cannot be written (none is left half written).</exception>
    public static SnapshotChoice Write(RunStore store, string runName, string epoch, string path, string? folder = null)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(path);
        var choice = Choose(store, runName, epoch, folder);
        string full = Path.GetFullPath(path);
        if (Directory.Exists(full))
            throw new DriftWatchException($"--out '{full}' is a folder; pass a file name, e.g. {Path.Combine(full, $"{choice.Run}-epoch{choice.Epoch}{Extension(choice.Format)}")}");
        try
        {
            Directory.CreateDirectory(Path.GetDirectoryName(full)!);
            if (choice.Format == SnapshotFormat.Weights)
            {
                using var weights = store.ReadSnapshot(choice.Source);
                OutputFile.Write(full, weights.CopyTo);
            }
            else
            {
                using var script = File.OpenRead(choice.Source);
                OutputFile.Write(full, script.CopyTo);
            }
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new DriftWatchException($"cannot write the snapshot of epoch {choice.Epoch} to '{full}': {e.Message}", e);
        }
        return choice;
    }

    /// <summary>The file extension a snapshot of <paramref name="format"/> is given by default: <c>.weights</c> or <c>.pt</c>.</summary>
    public static string Extension(SnapshotFormat format) => format == SnapshotFormat.TorchScript ? ".pt" : ".weights";

    /// <summary>A followed run's TorchScript file name for an epoch, as <c>hooks/driftwatch_follow.py</c> writes it: <c>epoch-0007.pt</c>.</summary>
    public static string TorchScriptFile(int epoch) => string.Create(CultureInfo.InvariantCulture, $"epoch-{epoch:D4}.pt");

    /// <summary>The description <c>follow</c> gives a run it watches, naming the run folder its TorchScript snapshots stay in (read back by <see cref="FollowedFolder"/>).</summary>
    public static string FollowedDescription(string folder)
    {
        ArgumentNullException.ThrowIfNull(folder);
        return FollowedPrefix + folder + FollowedSuffix;
    }

    /// <summary>The run folder a followed run's description names (<c>follow</c> records it there), or null for a run that was not followed.</summary>
    public static string? FollowedFolder(string description)
    {
        ArgumentNullException.ThrowIfNull(description);
        return description.StartsWith(FollowedPrefix, StringComparison.Ordinal) && description.EndsWith(FollowedSuffix, StringComparison.Ordinal)
            ? description[FollowedPrefix.Length..^FollowedSuffix.Length]
            : null;
    }

    private static double? ValidationLoss(EpochDocument epoch) =>
        epoch.Metrics.TryGetValue(MetricKeys.ValidationLoss, out double loss) && double.IsFinite(loss) ? loss : null;

    private static string Range(List<(EpochDocument Epoch, string? Source)> with)
    {
        var numbers = with.Select(c => c.Epoch.Epoch).ToList();
        bool contiguous = numbers[^1] - numbers[0] == numbers.Count - 1;
        return contiguous && numbers.Count > 2
            ? string.Create(CultureInfo.InvariantCulture, $"{numbers[0]} to {numbers[^1]}")
            : string.Join(", ", numbers.Take(12).Select(n => n.ToString(CultureInfo.InvariantCulture))) + (numbers.Count > 12 ? ", …" : "");
    }
}
