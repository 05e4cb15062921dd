using DriftWatch.Model;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Benchmarks;

/// <summary>A wide dense-only MLP of about 0.9 million parameters, the "wider model" of the IG throughput benchmark.</summary>
internal sealed class WideNet : nn.Module<Tensor, Tensor>, IWatchedModel, ILinearEntry
{
    public const int Inputs = 128;
    private readonly nn.Module<Tensor, Tensor> _body;
    private readonly nn.Module<Tensor, Tensor>[] _layers; // for the entry split; array fields are not registered

    public WideNet()
        : base("wide-net")
    {
        _layers = [nn.Linear(Inputs, 1024), nn.ReLU(), nn.Linear(1024, 768), nn.ReLU(), nn.Linear(768, 1)];
        _body = nn.Sequential(_layers);
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

    public Tensor EntryWeight => ((TorchSharp.Modules.Linear)_layers[0]).weight!;

    public Tensor? EntryBias => ((TorchSharp.Modules.Linear)_layers[0]).bias;

    public Tensor ScoreAfterEntry(Tensor entry) => _layers.Skip(1).Aggregate(entry, (h, layer) => layer.call(h));

    public override Tensor forward(Tensor input) => Score(input);
}
