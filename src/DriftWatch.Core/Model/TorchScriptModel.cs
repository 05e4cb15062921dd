using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Model;

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

    private TorchScriptModel(string path, jit.ScriptModule module, FeatureSchema schema, string encodeMethod, string scoreMethod)
    {
        Path = path;
        _module = module;
        Schema = schema;
        EncodeMethod = encodeMethod;
        ScoreMethod = scoreMethod;
    }

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
    /// <exception cref="DriftWatchException">The file is missing, is not TorchScript, or lacks one of the methods.</exception>
    public static TorchScriptModel Load(string path, FeatureSchema schema, string encodeMethod = "encode", string scoreMethod = "score")
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
        var model = new TorchScriptModel(path, module, schema, encodeMethod, scoreMethod);
        try
        {
            model._module.eval();
            model.CheckMethods();
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

    private void CheckMethods()
    {
        // A scripted module keeps only exported methods; probing with a tiny input tells a missing method apart
        // from one that merely rejects the input, since TorchSharp reports both as a native error.
        foreach (string method in new[] { EncodeMethod, ScoreMethod })
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

    private static string FirstLine(string message)
    {
        string line = message.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries).FirstOrDefault() ?? "";
        return line.Length > 300 ? line[..300] + "…" : line;
    }
}
