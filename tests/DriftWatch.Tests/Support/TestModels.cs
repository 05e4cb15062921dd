using DriftWatch.Model;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Support;

/// <summary>A score function in feature space, wrapped as a model with only dense features.</summary>
internal sealed class FunctionModel : nn.Module<Tensor, Tensor>, IWatchedModel
{
    private readonly Func<Tensor, Tensor> _score;

    public FunctionModel(int dense, Func<Tensor, Tensor> score)
        : base("function")
    {
        _score = score;
        var builder = FeatureSchema.CreateBuilder();
        for (int i = 0; i < dense; i++)
            builder.AddDense($"x{i + 1}");
        Schema = builder.Build();
        RegisterComponents();
    }

    public FeatureSchema Schema { get; }

    public nn.Module Module => this;

    public Tensor Encode(Tensor dense, Tensor categorical) => dense;

    public Tensor Score(Tensor features) => _score(features);

    public override Tensor forward(Tensor input) => _score(input);
}

/// <summary>A small MLP over dense features and one categorical through an embedding, as a real model would be.</summary>
internal sealed class SmallNet : nn.Module<Tensor, Tensor, Tensor>, IWatchedModel
{
    private readonly nn.Module<Tensor, Tensor> _embedding;
    private readonly nn.Module<Tensor, Tensor> _body;

    public SmallNet(int dense, int levels, int width, int hidden = 16, long seed = 1)
        : base("small-net")
    {
        torch.manual_seed(seed);
        _embedding = nn.Embedding(levels, width);
        _body = nn.Sequential(nn.Linear(dense + width, hidden), nn.ReLU(), nn.Linear(hidden, hidden), nn.ReLU(), nn.Linear(hidden, 1));
        var builder = FeatureSchema.CreateBuilder();
        for (int i = 0; i < dense; i++)
            builder.AddDense($"dense {i + 1}");
        Schema = builder.AddCategorical("colour", width).Build();
        RegisterComponents();
    }

    public FeatureSchema Schema { get; }

    public nn.Module Module => this;

    public Tensor Encode(Tensor dense, Tensor categorical) =>
        torch.cat([dense, _embedding.call(categorical.select(1, 0))], 1);

    public Tensor Score(Tensor features) => _body.call(features);

    public override Tensor forward(Tensor dense, Tensor categorical) => Score(Encode(dense, categorical));
}

/// <summary>
/// Tabular models shaped for <see cref="RowsBuilder"/>'s rows: three dense features and a categorical of 5 ids in 4
/// columns (7 feature-space columns), GELU between the hidden layers.
/// </summary>
internal static class RowsShapedModels
{
    /// <summary>The settings, with <paramref name="hidden"/> the widths of the hidden layers (none: a linear model).</summary>
    public static DriftWatch.Hooks.Models.TabularNetSettings Settings(params int[] hidden) => new()
    {
        DenseNames = ["dense 1", "dense 2", "dense 3"],
        Categoricals = [new DriftWatch.Hooks.Models.CategoricalEmbedding("colour", 5, 4)],
        HiddenWidths = [.. hidden],
        Activation = DriftWatch.Hooks.Models.HiddenActivation.GELU,
    };

    /// <summary><paramref name="rows"/> rows from <see cref="RowsBuilder"/> (seed <paramref name="seed"/>) in the model's feature space.</summary>
    public static Tensor Features(IWatchedModel model, int rows, int seed = 3)
    {
        var data = new RowsBuilder().WithRows(rows).WithSeed(seed).Build();
        using var noGrad = torch.no_grad();
        return model.Encode(torch.tensor(data.Dense, [rows, 3]), torch.tensor(data.Categorical, [rows, 1])).detach();
    }
}
