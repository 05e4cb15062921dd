using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Model;

/// <summary>
/// The linear layer a TorchScript model's score method applies first, and the exported method that runs the rest
/// (see <see cref="ILinearEntry"/>).
/// </summary>
/// <param name="Layer">The layer's module path as <c>named_modules()</c> names it (e.g. <c>body.0</c>); its parameters
/// <c>Layer.weight</c> <c>[units, columns]</c> and, if present, <c>Layer.bias</c> are the entry.</param>
/// <param name="Method">The exported method that takes the layer's output to the score method's output.</param>
public sealed record TorchScriptEntry(string Layer, string Method);

/// <summary>
/// A watched model loaded from a TorchScript file whose module exports an encode method and a score method
/// (for example a snapshot written by <c>hooks/driftwatch_follow.py</c>).
/// </summary>
/// <remarks>
/// Loading executes the TorchScript in the file: load only files you chose to trust. Gradients flow through the
/// score method, so every gradient-based attribution method works on it.
/// </remarks>
public sealed class TorchScriptModel : IWatchedModel, IDisposable
{
    private readonly jit.ScriptModule _module;
    private Tensor? _entryWeight;
    private Tensor? _entryBias;

    private TorchScriptModel(string path, jit.ScriptModule module, FeatureSchema schema, string encodeMethod, string scoreMethod, TorchScriptEntry? entry)
    {
        Path = path;
        _module = module;
        Schema = schema;
        EncodeMethod = encodeMethod;
        ScoreMethod = scoreMethod;
        Entry = entry;
    }

    /// <summary>The entry layer the run folder declares, or null.</summary>
    public TorchScriptEntry? Entry { get; }

    /// <summary>The model to watch: this one, or, with an <see cref="Entry"/>, this one declaring it as an <see cref="ILinearEntry"/>.</summary>
    public IWatchedModel Watched => Entry is null ? this : new DeclaredEntry(this);

    /// <summary>The file the module was loaded from.</summary>
    public string Path { get; }

    /// <summary>The name of the exported method that turns raw inputs into feature space. Default <c>encode</c>.</summary>
    public string EncodeMethod { get; }

    /// <summary>The name of the exported method that turns feature space into the output. Default <c>score</c>.</summary>
    public string ScoreMethod { get; }

    /// <inheritdoc />
    public FeatureSchema Schema { get; }

    /// <inheritdoc />
    public nn.Module Module => _module;

    /// <summary>Loads a TorchScript file and checks that it exports both methods.</summary>
    /// <param name="path">The TorchScript file (<c>torch.jit.save</c> of a scripted module).</param>
    /// <param name="schema">The features and the columns each owns, in the order the encode method lays them out.</param>
    /// <param name="encodeMethod">The encode method's name. Default <c>encode</c>.</param>
    /// <param name="scoreMethod">The score method's name. Default <c>score</c>.</param>
    /// <param name="entry">The entry layer and the method after it, when the run folder declares them. Default none.</param>
    /// <exception cref="DriftWatchException">The file is missing, is not TorchScript, or lacks one of the methods or the entry layer's weight.</exception>
    public static TorchScriptModel Load(string path, FeatureSchema schema, string encodeMethod = "encode", string scoreMethod = "score", TorchScriptEntry? entry = null)
    {
        ArgumentNullException.ThrowIfNull(path);
        ArgumentNullException.ThrowIfNull(schema);
        ArgumentException.ThrowIfNullOrWhiteSpace(encodeMethod);
        ArgumentException.ThrowIfNullOrWhiteSpace(scoreMethod);
        if (!File.Exists(path))
            throw new DriftWatchException($"TorchScript snapshot '{path}' does not exist");
        jit.ScriptModule module;
        try
        {
            module = jit.load(path);
        }
        catch (Exception e) when (e is not OutOfMemoryException)
        {
            throw new DriftWatchException($"TorchScript snapshot '{path}' could not be loaded ({FirstLine(e.Message)}); write it with torch.jit.save of a torch.jit.script module", e);
        }
        var model = new TorchScriptModel(path, module, schema, encodeMethod, scoreMethod, entry);
        try
        {
            model._module.eval();
            model.CheckMethods();
            model.FindEntry();
        }
        catch
        {
            model.Dispose();
            throw;
        }
        return model;
    }

    /// <inheritdoc />
    public Tensor Encode(Tensor dense, Tensor categorical)
    {
        ArgumentNullException.ThrowIfNull(dense);
        ArgumentNullException.ThrowIfNull(categorical);
        return Invoke(EncodeMethod, dense, categorical);
    }

    /// <inheritdoc />
    public Tensor Score(Tensor features)
    {
        ArgumentNullException.ThrowIfNull(features);
        return Invoke(ScoreMethod, features);
    }

    /// <summary>Runs encode and score once on the given raw rows, so a shape the module rejects fails here with the file named.</summary>
    /// <exception cref="DriftWatchException">Either method fails on these rows, or encode's output does not have the schema's width.</exception>
    public void CheckRows(Tensor dense, Tensor categorical)
    {
        ArgumentNullException.ThrowIfNull(dense);
        ArgumentNullException.ThrowIfNull(categorical);
        using var scope = torch.NewDisposeScope();
        using var noGrad = torch.no_grad();
        var features = Encode(dense, categorical);
        if (features.dim() != 2 || features.shape[0] != dense.shape[0] || features.shape[1] != Schema.ColumnCount)
        {
            throw new DriftWatchException(
                $"TorchScript snapshot '{Path}': {EncodeMethod} returned shape [{string.Join(", ", features.shape)}] for {dense.shape[0]} probe rows; "
                + $"the schema declares [{dense.shape[0]}, {Schema.ColumnCount}]");
        }
        var output = Score(features.to(ScalarType.Float32));
        if (output.dim() is < 1 or > 2 || output.shape[0] != dense.shape[0])
            throw new DriftWatchException($"TorchScript snapshot '{Path}': {ScoreMethod} returned shape [{string.Join(", ", output.shape)}]; expected one row per probe row");
    }

    /// <inheritdoc />
    public void Dispose() => _module.Dispose();

    private Tensor Invoke(string method, params object[] arguments)
    {
        object? result;
        try
        {
            result = _module.invoke(method, arguments);
        }
        catch (Exception e) when (e is not OutOfMemoryException)
        {
            string shapes = string.Join(", ", arguments.OfType<Tensor>().Select(t => $"{t.dtype} [{string.Join(", ", t.shape)}]"));
            throw new DriftWatchException($"TorchScript snapshot '{Path}': {method}({shapes}) failed: {FirstLine(e.Message)}", e);
        }
        return result as Tensor
            ?? throw new DriftWatchException($"TorchScript snapshot '{Path}': {method} returned {result?.GetType().Name ?? "nothing"}, not one tensor");
    }

    private void FindEntry()
    {
        if (Entry is null)
            return;
        var parameters = _module.named_parameters().ToDictionary(p => p.name, p => p.parameter, StringComparer.Ordinal);
        if (!parameters.TryGetValue(Entry.Layer + ".weight", out var weight))
        {
            string layers = string.Join(", ", parameters.Keys.Where(k => k.EndsWith(".weight", StringComparison.Ordinal)).Select(k => k[..^".weight".Length]).Take(12));
            throw new DriftWatchException($"TorchScript snapshot '{Path}' has no parameter '{Entry.Layer}.weight' for the entry layer schema.json names; layers with a weight: {(layers.Length == 0 ? "none" : layers)}");
        }
        _entryWeight = weight;
        _entryBias = parameters.GetValueOrDefault(Entry.Layer + ".bias");
    }

    private void CheckMethods()
    {
        // A scripted module keeps only exported methods; probing with a tiny input tells a missing method apart
        // from one that merely rejects the input, since TorchSharp reports both as a native error.
        foreach (string method in Entry is null ? [EncodeMethod, ScoreMethod] : new[] { EncodeMethod, ScoreMethod, Entry.Method })
        {
            if (!HasMethod(method))
                throw new DriftWatchException($"TorchScript snapshot '{Path}' has no method '{method}'; define it on the module and mark it @torch.jit.export before torch.jit.script");
        }
    }

    private bool HasMethod(string method)
    {
        try
        {
            using var scope = torch.NewDisposeScope();
            _module.invoke(method);
            return true;
        }
        catch (Exception e) when (e is not OutOfMemoryException)
        {
            return !IsMissingMethod(e.Message);
        }
    }

    private static bool IsMissingMethod(string message) =>
        message.Contains("Method '", StringComparison.Ordinal) && message.Contains("is not defined", StringComparison.Ordinal)
        || message.Contains("does not have a field with name", StringComparison.Ordinal)
        || message.Contains("has no attribute", StringComparison.Ordinal);

    // The same model declaring its entry layer; the snapshot's weights are read when an attribution starts.
    private sealed class DeclaredEntry(TorchScriptModel model) : IWatchedModel, ILinearEntry
    {
        public FeatureSchema Schema => model.Schema;

        public nn.Module Module => model.Module;

        public Tensor EntryWeight => model._entryWeight!;

        public Tensor? EntryBias => model._entryBias;

        public Tensor Encode(Tensor dense, Tensor categorical) => model.Encode(dense, categorical);

        public Tensor Score(Tensor features) => model.Score(features);

        public Tensor ScoreAfterEntry(Tensor entry) => model.Invoke(model.Entry!.Method, entry);
    }

    private static string FirstLine(string message)
    {
        string line = message.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries).FirstOrDefault() ?? "";
        return line.Length > 300 ? line[..300] + "…" : line;
    }
}
