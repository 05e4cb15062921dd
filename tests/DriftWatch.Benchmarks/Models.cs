using DriftWatch.Model;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Benchmarks;

/// <summary>A wide dense-only MLP of about 0.9 million parameters, the "wider model" of the IG throughput benchmark.</summary>
internal sealed class WideNet : nn.Module<Tensor, Tensor>, IWatchedModel, ILinearEntry
{
    public const int Inputs = 128;
    private readonly nn.Module<Tensor, Tensor> _body;
    private readonly LayerChain _chain;

    public WideNet()
        : base("wide-net")
    {
        nn.Module<Tensor, Tensor>[] layers = [nn.Linear(Inputs, 1024), nn.ReLU(), nn.Linear(1024, 768), nn.ReLU(), nn.Linear(768, 1)];
        _body = nn.Sequential(layers);
        _chain = new LayerChain(layers);
        var schema = FeatureSchema.CreateBuilder();
        for (int i = 0; i < Inputs; i++)
            schema.AddDense($"x{i}");
        Schema = schema.Build();
        RegisterComponents();
    }

    public FeatureSchema Schema { get; }

    public nn.Module Module => this;

    public long ParameterCount => parameters().Sum(p => p.numel());

    public Tensor Encode(Tensor dense, Tensor categorical) => dense;

    public Tensor Score(Tensor features) => _body.call(features);

    public Tensor EntryWeight => _chain.EntryWeight;

    public Tensor? EntryBias => _chain.EntryBias;

    public Tensor ScoreAfterEntry(Tensor entry) => _chain.ScoreAfterEntry(entry);

    public override Tensor forward(Tensor input) => Score(input);
}
