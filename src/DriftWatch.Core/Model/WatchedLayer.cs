using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Model;

/// <summary>
/// A hidden layer of a watched model, named by its module path as <c>named_modules()</c> lists it (e.g. <c>_scorer.1</c>),
/// reached through a forward hook that is registered for one call and always removed before the call returns.
/// </summary>
/// <remarks>
/// The layer's output is what is attributed: its units are the output's values per row, flattened in row-major order.
/// The score step must invoke the layer with <c>.call(x)</c> (a <c>Sequential</c> does), since TorchSharp runs hooks only there.
/// </remarks>
public sealed class WatchedLayer
{
    private readonly nn.Module<Tensor, Tensor> _module;

    private WatchedLayer(string path, nn.Module<Tensor, Tensor> module)
    {
        Path = path;
        _module = module;
    }

    /// <summary>The module path, as <c>named_modules()</c> of the watched model's module names it.</summary>
    public string Path { get; }

    /// <summary>The layer's module.</summary>
    public nn.Module<Tensor, Tensor> Module => _module;

    /// <summary>The module paths of <paramref name="root"/> that can be watched: submodules taking and returning one tensor.</summary>
    public static IReadOnlyList<string> Paths(nn.Module root)
    {
        ArgumentNullException.ThrowIfNull(root);
        return root.named_modules()
            .Where(m => m.name.Length > 0 && m.module is nn.Module<Tensor, Tensor>)
            .Select(m => m.name)
            .ToList();
    }

    /// <summary>Finds the layer at <paramref name="path"/> in <paramref name="root"/>.</summary>
    /// <exception cref="DriftWatchException">No module has that path, or it does not take and return one tensor.</exception>
    public static WatchedLayer Find(nn.Module root, string path)
    {
        ArgumentNullException.ThrowIfNull(root);
        ArgumentNullException.ThrowIfNull(path);
        var found = root.named_modules().FirstOrDefault(m => m.name == path && path.Length > 0);
        if (found.module is null)
        {
            var paths = Paths(root);
            string listed = paths.Count == 0
                ? "the model has no submodule that takes and returns one tensor"
                : "layers that can be watched: " + string.Join(", ", paths.Take(24)) + (paths.Count > 24 ? $" and {paths.Count - 24} more" : "");
            throw new DriftWatchException($"the model has no layer '{path}'; {listed}");
        }
        if (found.module is not nn.Module<Tensor, Tensor> single)
            throw new DriftWatchException($"layer '{path}' is a {found.module.GetType().Name}, which does not take and return one tensor; name one of its submodules");
        return new WatchedLayer(path, single);
    }

    /// <summary>
    /// Runs <paramref name="body"/> with <paramref name="onOutput"/> registered as a forward hook on the layer, and removes
    /// the hook before returning, whether <paramref name="body"/> returns or throws.
    /// </summary>
    /// <param name="onOutput">Sees the layer's output each time the layer is called; returns a tensor to use instead, or null to keep it.</param>
    /// <param name="body">The work done while the hook is registered.</param>
    public T WithHook<T>(Func<Tensor, Tensor?> onOutput, Func<T> body)
    {
        ArgumentNullException.ThrowIfNull(onOutput);
        ArgumentNullException.ThrowIfNull(body);
        var remover = _module.register_forward_hook((_, _, output) => onOutput(output)!); // null keeps the output
        try
        {
            return body();
        }
        finally
        {
            remover.remove();
        }
    }

    /// <summary>
    /// Evaluates <paramref name="score"/> on <paramref name="points"/> while the layer's output is replaced by a leaf tensor
    /// of the same values, and returns the score and that leaf: gradients of the score then stop at the layer.
    /// </summary>
    /// <exception cref="DriftWatchException">The score step did not call the layer, or called it more than once.</exception>
    internal (Tensor Score, Tensor Output) ScoreThroughLeaf(Func<Tensor, Tensor> score, Tensor points)
    {
        Tensor? leaf = null;
        int calls = 0;
        var result = WithHook(
            output =>
            {
                calls++;
                leaf = output.detach().requires_grad_(true);
                // A Sequential disposes each intermediate tensor once the next child has used it; the model gets a view
                // of the leaf, so the leaf itself stays alive for the gradient.
                return leaf.alias();
            },
            () => score(points));
        CheckCalls(calls);
        return (result, leaf!);
    }

    /// <summary>Evaluates <paramref name="score"/> on <paramref name="points"/> and returns the score and the layer's output, left in the graph.</summary>
    /// <exception cref="DriftWatchException">The score step did not call the layer, or called it more than once.</exception>
    internal (Tensor Score, Tensor Output) ScoreAndOutput(Func<Tensor, Tensor> score, Tensor points)
    {
        Tensor? seen = null;
        int calls = 0;
        var result = WithHook(
            output =>
            {
                calls++;
                seen = output;
                return output.alias(); // the model's copy may be disposed by a Sequential; ours stays
            },
            () => score(points));
        CheckCalls(calls);
        return (result, seen!);
    }

    private void CheckCalls(int calls)
    {
        if (calls == 0)
            throw new DriftWatchException($"the score step never called layer '{Path}'; name a layer the score step invokes with .call(x) (a Sequential's children are)");
        if (calls > 1)
            throw new DriftWatchException($"the score step called layer '{Path}' {calls} times; a watched layer must be called once per evaluation (a shared module cannot be attributed per unit)");
    }
}
