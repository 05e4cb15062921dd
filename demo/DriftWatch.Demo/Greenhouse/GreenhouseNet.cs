using DriftWatch.Model;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Demo.Greenhouse;

/// <summary>A categorical input of <see cref="GreenhouseNet"/>: its name and how many ids its embedding holds.</summary>
/// <param name="Name">The feature's name.</param>
/// <param name="Levels">Number of ids (0 … Levels − 1).</param>
public sealed record CategoricalInput(string Name, int Levels);

/// <summary>
/// The demo's grading model: dense features and one embedding per categorical feature, concatenated (the encode
/// step), then an MLP with ReLU to one logit (the score step).
/// </summary>
public sealed class GreenhouseNet : nn.Module<Tensor, Tensor, Tensor>, IWatchedModel, ILinearEntry
{
    private readonly TorchSharp.Modules.ModuleList<nn.Module<Tensor, Tensor>> _embeddings;
    private readonly nn.Module<Tensor, Tensor> _scorer;

    private readonly LayerChain _chain; // the score step's layers again, for ILinearEntry; not registered a second time

    /// <summary>Creates the model with freshly initialised weights (seed torch first for reproducible weights).</summary>
    /// <param name="denseNames">The dense features, in column order.</param>
    /// <param name="categoricals">The categorical features, in column order after the dense ones.</param>
    /// <param name="embeddingWidth">Columns of each categorical's embedding. Default 8.</param>
    /// <param name="hidden">Width of each of the two hidden layers. Default 64.</param>
    /// <param name="dropout">Dropout after each hidden layer, 0 for none. Default 0.</param>
    public GreenhouseNet(IReadOnlyList<string> denseNames, IReadOnlyList<CategoricalInput> categoricals, int embeddingWidth = 8, int hidden = 64, double dropout = 0)
        : base("greenhouse-net")
    {
        ArgumentNullException.ThrowIfNull(denseNames);
        ArgumentNullException.ThrowIfNull(categoricals);
        ArgumentOutOfRangeException.ThrowIfLessThan(embeddingWidth, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(hidden, 1);
        if (!(dropout >= 0 && dropout < 1))
            throw new ArgumentOutOfRangeException(nameof(dropout), dropout, "must be at least 0 and below 1");

        var schema = FeatureSchema.CreateBuilder();
        foreach (string name in denseNames)
            schema.AddDense(name);
        foreach (var categorical in categoricals)
        {
            ArgumentOutOfRangeException.ThrowIfLessThan(categorical.Levels, 1, nameof(categoricals));
            schema.AddCategorical(categorical.Name, embeddingWidth);
        }
        Schema = schema.Build();
        EmbeddingWidth = embeddingWidth;
        Hidden = hidden;
        Dropout = dropout;

        _embeddings = nn.ModuleList(categoricals.Select(c => (nn.Module<Tensor, Tensor>)nn.Embedding(c.Levels, embeddingWidth)).ToArray());
        var layers = new List<nn.Module<Tensor, Tensor>> { nn.Linear(Schema.ColumnCount, hidden), nn.ReLU() };
        if (dropout > 0)
            layers.Add(nn.Dropout(dropout));
        layers.AddRange([nn.Linear(hidden, hidden), nn.ReLU()]);
        if (dropout > 0)
            layers.Add(nn.Dropout(dropout));
        layers.Add(nn.Linear(hidden, 1));
        _scorer = nn.Sequential(layers);
        _chain = new LayerChain(layers);
        RegisterComponents();
    }

    /// <summary>Creates the model for a scenario's features.</summary>
    /// <param name="scenario">The scenario whose dense names and categorical levels shape the inputs.</param>
    /// <param name="embeddingWidth">Columns of each categorical's embedding. Default 8.</param>
    /// <param name="hidden">Width of each hidden layer. Default 64.</param>
    /// <param name="dropout">Dropout after each hidden layer. Default 0.</param>
    public static GreenhouseNet For(GreenhouseScenario scenario, int embeddingWidth = 8, int hidden = 64, double dropout = 0)
    {
        ArgumentNullException.ThrowIfNull(scenario);
        return new GreenhouseNet(
            [.. scenario.DenseFeatures.Select(f => f.Name)],
            [.. scenario.CategoricalFeatures.Select(f => new CategoricalInput(f.Name, f.Levels))],
            embeddingWidth,
            hidden,
            dropout);
    }

    /// <summary>The module path of the first hidden layer's ReLU output, the layer the demo watches unit by unit.</summary>
    public const string FirstHiddenLayer = "_scorer.1";

    /// <inheritdoc />
    public FeatureSchema Schema { get; }

    /// <summary>Columns of each categorical's embedding.</summary>
    public int EmbeddingWidth { get; }

    /// <summary>Width of each hidden layer.</summary>
    public int Hidden { get; }

    /// <summary>Dropout after each hidden layer.</summary>
    public double Dropout { get; }

    nn.Module IWatchedModel.Module => this;

    /// <summary>Dense <c>[rows, dense]</c> float32 and ids <c>[rows, categoricals]</c> int64 to feature space, in schema order.</summary>
    public Tensor Encode(Tensor dense, Tensor categorical)
    {
        ArgumentNullException.ThrowIfNull(dense);
        ArgumentNullException.ThrowIfNull(categorical);
        var parts = new Tensor[1 + _embeddings.Count];
        parts[0] = dense;
        for (int c = 0; c < _embeddings.Count; c++)
            parts[c + 1] = _embeddings[c].call(categorical.select(1, c));
        return torch.cat(parts, 1);
    }

    /// <summary>Feature space <c>[rows, columns]</c> to the pass logit <c>[rows, 1]</c>.</summary>
    public Tensor Score(Tensor features) => _scorer.call(features);

    /// <inheritdoc />
    public Tensor EntryWeight => _chain.EntryWeight;

    /// <inheritdoc />
    public Tensor? EntryBias => _chain.EntryBias;

    /// <inheritdoc />
    public Tensor ScoreAfterEntry(Tensor entry) => _chain.ScoreAfterEntry(entry);

    /// <summary>The pass logit <c>[rows, 1]</c> of raw inputs.</summary>
    public override Tensor forward(Tensor dense, Tensor categorical) => Score(Encode(dense, categorical));
}
