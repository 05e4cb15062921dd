using System.Reflection;
using DriftWatch.Model;
using TorchSharp;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Layers;

/// <summary>A dense-only model whose score step is one Sequential, so its children can be watched by path (<c>body.0</c>, …).</summary>
internal sealed class StackModel : nn.Module<Tensor, Tensor>, IWatchedModel
{
    private readonly nn.Module<Tensor, Tensor> body;

    public StackModel(int dense, params nn.Module<Tensor, Tensor>[] layers)
        : base("stack")
    {
        body = nn.Sequential(layers);
        var builder = FeatureSchema.CreateBuilder();
        for (int i = 0; i < dense; i++)
            builder.AddDense($"x{i + 1}");
        Schema = builder.Build();
        RegisterComponents();
    }

    public FeatureSchema Schema { get; }

    public nn.Module Module => this;

    public Tensor Encode(Tensor dense, Tensor categorical) => dense;

    public Tensor Score(Tensor features) => body.call(features);

    public override Tensor forward(Tensor input) => Score(input);

    /// <summary>A tanh MLP dense → hidden → 1 with seeded weights: smooth, so path integrals converge fast.</summary>
    public static StackModel Smooth(int dense, int hidden, long seed)
    {
        torch.manual_seed(seed);
        return new StackModel(dense, nn.Linear(dense, hidden), nn.Tanh(), nn.Linear(hidden, 1));
    }

    /// <summary>A ReLU MLP dense → hidden → hidden → 1 with seeded weights.</summary>
    public static StackModel Mlp(int dense, int hidden, long seed)
    {
        torch.manual_seed(seed);
        return new StackModel(dense, nn.Linear(dense, hidden), nn.ReLU(), nn.Linear(hidden, hidden), nn.ReLU(), nn.Linear(hidden, 1));
    }
}

/// <summary>Reads TorchSharp's own registry of forward hooks, so a test sees what is really registered.</summary>
internal static class HookCount
{
    public static int Of(nn.Module module)
    {
        for (var type = module.GetType(); type is not null; type = type.BaseType)
        {
            var field = type.GetField("post_hooks", BindingFlags.Instance | BindingFlags.NonPublic);
            if (field is not null)
                return ((System.Collections.ICollection)field.GetValue(module)!).Count;
        }
        throw new InvalidOperationException($"{module.GetType().Name} has no post_hooks field; TorchSharp's hook registry moved");
    }
}
