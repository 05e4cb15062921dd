using System.Globalization;
using System.Security.Cryptography;
using System.Text;
using TorchSharp.Modules;

namespace DriftWatch.Demo;

/// <summary>
/// The demo's optimizer state (Adam's step counts and moment estimates), saved beside the store after every epoch so that
/// a resumed run continues exactly where it stopped; the store itself keeps only the weights.
/// </summary>
/// <remarks>
/// Files live in <c>STORE.training-state/</c>, one per run and epoch, written to a temporary name and renamed, before
/// the epoch is handed to the monitor: whenever the store holds an epoch, its optimizer file is complete. The two newest
/// epochs are kept. A failure to write one is reported once and training goes on.
/// </remarks>
public sealed class OptimizerStateFiles
{
    private const string Extension = ".optimizer";
    private readonly string _prefix;
    private readonly TextWriter _log;
    private bool _warned;

    /// <summary>Creates the file set of one run of one store.</summary>
    /// <param name="storePath">The store file.</param>
    /// <param name="runName">The run's name; files are named by its hash, so any name is a safe file name.</param>
    /// <param name="log">Where a failure to write is reported.</param>
    public OptimizerStateFiles(string storePath, string runName, TextWriter log)
    {
        ArgumentException.ThrowIfNullOrWhiteSpace(storePath);
        ArgumentNullException.ThrowIfNull(runName);
        ArgumentNullException.ThrowIfNull(log);
        Folder = Path.GetFullPath(storePath) + ".training-state";
        _prefix = Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(runName)))[..16];
        _log = log;
    }

    /// <summary>The folder holding the files.</summary>
    public string Folder { get; }

    /// <summary>The file of one epoch.</summary>
    public string PathOf(int epoch) => Path.Combine(Folder, $"{_prefix}-epoch{epoch.ToString("D6", CultureInfo.InvariantCulture)}{Extension}");

    /// <summary>Whether the state after <paramref name="epoch"/> is on disk.</summary>
    public bool Exists(int epoch) => File.Exists(PathOf(epoch));

    /// <summary>Saves the optimizer's state after <paramref name="epoch"/> and removes this run's files older than the epoch before.</summary>
    public void Save(OptimizerHelper optimizer, int epoch)
    {
        ArgumentNullException.ThrowIfNull(optimizer);
        string path = PathOf(epoch);
        string temporary = path + ".partial";
        try
        {
            Directory.CreateDirectory(Folder);
            using (var stream = new FileStream(temporary, FileMode.Create, FileAccess.Write, FileShare.None))
            using (var writer = new BinaryWriter(stream))
                optimizer.save_state_dict(writer);
            File.Move(temporary, path, overwrite: true);
            foreach (string old in Directory.EnumerateFiles(Folder, _prefix + "-epoch*" + Extension))
            {
                if (EpochOf(old) is int e && e < epoch - 1)
                    File.Delete(old);
            }
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            if (!_warned)
                _log.WriteLine($"warning   the optimizer state could not be saved ({e.Message}); training goes on, but a resumed run will restart Adam's moment estimates");
            _warned = true;
        }
    }

    /// <summary>Loads the state saved after <paramref name="epoch"/>; false when there is none (the optimizer keeps its fresh state).</summary>
    public bool TryLoad(OptimizerHelper optimizer, int epoch)
    {
        ArgumentNullException.ThrowIfNull(optimizer);
        string path = PathOf(epoch);
        if (!File.Exists(path))
            return false;
        try
        {
            using var stream = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.Read);
            using var reader = new BinaryReader(stream);
            optimizer.load_state_dict(reader);
            return true;
        }
        catch (Exception e) when (e is IOException or InvalidDataException or UnauthorizedAccessException or ArgumentException or InvalidOperationException)
        {
            _log.WriteLine($"warning   the optimizer state '{path}' could not be read ({e.Message}); Adam restarts its moment estimates");
            return false;
        }
    }

    private static int? EpochOf(string path)
    {
        string name = Path.GetFileNameWithoutExtension(path);
        int at = name.LastIndexOf("-epoch", StringComparison.Ordinal);
        return at >= 0 && int.TryParse(name.AsSpan(at + 6), NumberStyles.None, CultureInfo.InvariantCulture, out int epoch) ? epoch : null;
    }
}
