using DriftWatch.Model;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Docs.Entry;

// docs/embedding.md's model example, compiled: the README's model declaring its entry layer. Lines it shares with the
// README's (schema, module, encode) are written there once, as "as above".
// README:begin
public sealed class GradeNet : nn.Module<Tensor, Tensor, Tensor>, IWatchedModel, ILinearEntry
{
    private readonly nn.Module<Tensor, Tensor> _bay = nn.Embedding(12, 8);
    private readonly TorchSharp.Modules.Linear _entry = nn.Linear(2 + 8, 32);
    private readonly nn.Module<Tensor, Tensor> _rest = nn.Sequential(nn.ReLU(), nn.Linear(32, 1));

    public GradeNet() : base("grade-net") => RegisterComponents();

    public FeatureSchema Schema { get; } = FeatureSchema.CreateBuilder()
        .AddDense("air temperature").AddDense("humidity").AddCategorical("greenhouse bay", 8).Build();

    public nn.Module Module => this;

    public Tensor Encode(Tensor dense, Tensor categorical) => torch.cat([dense, _bay.call(categorical.select(1, 0))], 1);

    public Tensor Score(Tensor features) => _rest.call(_entry.call(features));

    public Tensor EntryWeight => _entry.weight!;

    public Tensor? EntryBias => _entry.bias;

    public Tensor ScoreAfterEntry(Tensor entry) => _rest.call(entry);

    public override Tensor forward(Tensor dense, Tensor categorical) => Score(Encode(dense, categorical));
}
// README:end
