using DriftWatch.Model;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Hooks.Models;

/// <summary>
/// A ready model family for tabular data: dense inputs and one embedding per categorical input, concatenated into feature
/// space (the encode step), then an MLP head — hidden layers with an activation and optional dropout — to the outputs (the
/// score step). A run watching it records its recipe, so <c>driftwatch reattribute</c> rebuilds it with no extra option.
/// </summary>
/// <remarks>
/// Parameters are <c>_embeddings.i.weight</c> and <c>_scorer.k.weight</c>/<c>.bias</c>; the embeddings are created first, in
/// input order, then the head's layers, so one torch seed gives the same initial weights every time.
/// </remarks>
public sealed class TabularNet : nn.Module<Tensor, Tensor, Tensor>, IRebuildableModel, ILinearEntry
{
    private readonly TorchSharp.Modules.ModuleList<nn.Module<Tensor, Tensor>> _embeddings;
    private readonly nn.Module<Tensor, Tensor> _scorer;

    private readonly LayerChain _chain; // the score step's layers again, for ILinearEntry; not registered a second time

    /// <summary>Creates the model with freshly initialised weights (seed torch first for reproducible weights).</summary>
    /// <exception cref="DriftWatchException">The settings are not valid; the message names the first bad one.</exception>
    public TabularNet(TabularNetSettings settings)
        : base("tabular-net")
    {
        ArgumentNullException.ThrowIfNull(settings);
        settings.Validate();
        Settings = settings;

        var schema = FeatureSchema.CreateBuilder();
        foreach (string name in settings.DenseNames)
            schema.AddDense(name);
        foreach (var categorical in settings.Categoricals)
            schema.AddCategorical(categorical.Name, categorical.Width);
        Schema = schema.Build();

        _embeddings = nn.ModuleList(settings.Categoricals.Select(c => (nn.Module<Tensor, Tensor>)nn.Embedding(c.Cardinality, c.Width)).ToArray());
        var layers = new List<nn.Module<Tensor, Tensor>>();
        long width = Schema.ColumnCount;
        foreach (int hidden in settings.HiddenWidths)
        {
            layers.Add(nn.Linear(width, hidden));
            layers.Add(Activation(settings.Activation));
            if (settings.Dropout > 0)
                layers.Add(nn.Dropout(settings.Dropout));
            width = hidden;
        }
        layers.Add(nn.Linear(width, settings.Outputs));
        _scorer = nn.Sequential(layers);
        _chain = new LayerChain(layers);
        RegisterComponents();
    }

    /// <summary>The settings the model was built from.</summary>
    public TabularNetSettings Settings { get; }

    /// <inheritdoc />
    public FeatureSchema Schema { get; }

    /// <inheritdoc />
    public ModelRecipe Recipe => new(typeof(TabularNetFactory), Settings.ToStored());

    nn.Module IWatchedModel.Module => this;

    /// <summary>Dense <c>[rows, dense]</c> float32 and ids <c>[rows, categoricals]</c> int64 to feature space, in schema order.</summary>
    public Tensor Encode(Tensor dense, Tensor categorical)
    {
        ArgumentNullException.ThrowIfNull(dense);
        ArgumentNullException.ThrowIfNull(categorical);
        var parts = new List<Tensor>(1 + _embeddings.Count);
        if (Settings.DenseNames.Length > 0)
            parts.Add(dense);
        for (int c = 0; c < _embeddings.Count; c++)
            parts.Add(_embeddings[c].call(categorical.select(1, c)));
        return parts.Count == 1 ? parts[0] : torch.cat(parts, 1);
    }

    /// <summary>Feature space <c>[rows, columns]</c> to the outputs <c>[rows, outputs]</c>.</summary>
    public Tensor Score(Tensor features) => _scorer.call(features);

    /// <inheritdoc />
    public Tensor EntryWeight => _chain.EntryWeight;

    /// <inheritdoc />
    public Tensor? EntryBias => _chain.EntryBias;

    /// <inheritdoc />
    public Tensor ScoreAfterEntry(Tensor entry) => _chain.ScoreAfterEntry(entry);

    /// <summary>The outputs <c>[rows, outputs]</c> of raw inputs.</summary>
    public override Tensor forward(Tensor dense, Tensor categorical) => Score(Encode(dense, categorical));

    private static nn.Module<Tensor, Tensor> Activation(HiddenActivation activation) => activation switch
    {
        HiddenActivation.ReLU => nn.ReLU(),
        HiddenActivation.GELU => nn.GELU(),
        HiddenActivation.Tanh => nn.Tanh(),
        HiddenActivation.SiLU => nn.SiLU(),
        _ => throw new ArgumentOutOfRangeException(nameof(activation), activation, "unknown activation"),
    };
}

/// <summary>Rebuilds a <see cref="TabularNet"/> from the settings a run recorded (<see cref="TabularNetSettings.ToStored"/>).</summary>
public sealed class TabularNetFactory : IModelFactory
{
    /// <inheritdoc />
    public IWatchedModel Create(IReadOnlyDictionary<string, string> settings) => new TabularNet(TabularNetSettings.FromStored(settings));
}
