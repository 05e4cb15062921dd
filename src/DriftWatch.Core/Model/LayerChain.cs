using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Model;

/// <summary>
/// The <see cref="ILinearEntry"/> members of a score step built as a chain of layers whose first is a linear layer,
/// as a model built on <c>nn.Sequential</c> has: hold one beside the sequential module and forward the three members.
/// </summary>
/// <remarks>
/// Keep it in a field of this type: module registration reads module fields, not this class, so the layers keep the
/// names their sequential module gives them in snapshots.
/// </remarks>
public sealed class LayerChain
{
    private readonly nn.Module<Tensor, Tensor>[] _layers;
    private readonly TorchSharp.Modules.Linear _entry;

    /// <summary>Holds <paramref name="layers"/>, the score step's layers in the order they run.</summary>
    /// <exception cref="ArgumentException">The chain is empty or its first layer is not a linear layer.</exception>
    public LayerChain(IEnumerable<nn.Module<Tensor, Tensor>> layers)
    {
        ArgumentNullException.ThrowIfNull(layers);
        _layers = [.. layers];
        _entry = _layers.Length > 0 && _layers[0] is TorchSharp.Modules.Linear linear
            ? linear
            : throw new ArgumentException($"the first layer of the chain must be a linear layer; got {(_layers.Length == 0 ? "no layer" : _layers[0].GetType().Name)}", nameof(layers));
    }

    /// <summary>The first layer's weight, <c>[units, columns]</c>.</summary>
    public Tensor EntryWeight => _entry.weight!;

    /// <summary>The first layer's bias, or null.</summary>
    public Tensor? EntryBias => _entry.bias;

    /// <summary>Runs every layer after the first on <paramref name="entry"/>, the first layer's output.</summary>
    public Tensor ScoreAfterEntry(Tensor entry)
    {
        var output = entry;
        for (int i = 1; i < _layers.Length; i++)
            output = _layers[i].call(output);
        return output;
    }
}
