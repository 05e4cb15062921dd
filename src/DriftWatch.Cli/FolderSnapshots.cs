using DriftWatch.Attribution;
using DriftWatch.Charts;
using DriftWatch.Model;
using DriftWatch.Storage;
using TorchSharp;

namespace DriftWatch.Cli;

/// <summary>
/// The models of a followed Python run: each epoch's TorchScript snapshot in its run folder is that epoch's model
/// (<c>epoch-NNNN.pt</c>), loaded with the folder's schema, methods and entry layer.
/// </summary>
internal sealed class FolderSnapshots : EpochModels
{
    private readonly RunFolder _folder;
    private TorchScriptModel? _loaded;

    private FolderSnapshots(RunFolder folder) => _folder = folder;

    /// <summary>The run folder.</summary>
    public string Path => _folder.Path;

    /// <inheritdoc />
    public override FeatureSchema Schema => _folder.Schema;

    /// <summary>The run folder of <paramref name="run"/>: <paramref name="given"/>, else the one <c>follow</c> recorded; null for a run with neither.</summary>
    /// <exception cref="DriftWatchException">The folder is gone, unreadable, or holds another run's probe rows.</exception>
    public static FolderSnapshots? Of(RunDocument run, string? given)
    {
        string? path = given ?? run.RunFolder;
        if (path is null)
            return null;
        string name = DisplayText.Clean(run.Name);
        if (!Directory.Exists(path))
        {
            throw new DriftWatchException(given is null
                ? $"run '{name}' was followed from run folder '{DisplayText.Clean(path)}', which is not there any more; its TorchScript snapshots are the run's models — pass --run-folder with the folder's new place"
                : $"--run-folder '{DisplayText.Clean(path)}' does not exist; give the folder the training loop wrote with driftwatch_follow.py");
        }
        var folder = RunFolder.Open(path);
        if (folder.Probe.Hash != run.ProbeHash)
            throw new DriftWatchException($"run folder '{DisplayText.Clean(folder.Path)}' holds other probe rows than run '{name}' was followed with; give the folder that run came from");
        if (!folder.Schema.Names.SequenceEqual(RunContextSchema(run)))
            throw new DriftWatchException($"run folder '{DisplayText.Clean(folder.Path)}' declares other features than run '{name}'; give the folder that run came from");
        return new FolderSnapshots(folder);
    }

    /// <inheritdoc />
    public override void CheckFit(RunStore store, RunDocument run, IReadOnlyList<EpochDocument> epochs)
    {
        var first = epochs.Select(e => e.Epoch).FirstOrDefault(e => File.Exists(SnapshotPath(e)), -1);
        if (first < 0)
            return;
        using var scope = torch.NewDisposeScope();
        using var model = Open(first);
        var rows = _folder.Probe.Rows;
        model.CheckRows(torch.tensor(rows.Dense, [rows.Count, rows.DenseCount]), torch.tensor(rows.Categorical, [rows.Count, rows.CategoricalCount]));
    }

    /// <inheritdoc />
    public override IWatchedModel? Load(RunStore store, RunDocument run, EpochDocument epoch)
    {
        Release();
        if (!File.Exists(SnapshotPath(epoch.Epoch)))
            return null;
        _loaded = Open(epoch.Epoch);
        return _loaded.Watched;
    }

    /// <inheritdoc />
    public override void Release()
    {
        _loaded?.Dispose();
        _loaded = null;
    }

    /// <summary>The TorchScript snapshot of an epoch, loaded; the caller disposes it.</summary>
    /// <exception cref="DriftWatchException">The file is missing, not TorchScript, or lacks a method.</exception>
    public TorchScriptModel Open(int epoch) =>
        TorchScriptModel.Load(SnapshotPath(epoch), _folder.Schema, _folder.EncodeMethod, _folder.ScoreMethod, _folder.Entry);

    private string SnapshotPath(int epoch) => System.IO.Path.Combine(_folder.Path, RunFolder.SnapshotFile(epoch));

    private static IEnumerable<string> RunContextSchema(RunDocument run) => run.Features.Select(f => f.Name);
}
