using TorchSharp;
using TorchSharp.Modules;
using static TorchSharp.torch;

namespace DriftWatch.Hooks.Optimizers;

/// <summary>
/// Adam (Kingma and Ba 2015, Algorithm 1) as TorchSharp's <see cref="TorchSharp.Modules.Adam"/> computes it, the same
/// native operations in the same order, with the same options, state and state files, but with every scalar it hands
/// to native code created, held and disposed by the step itself.
/// </summary>
/// <remarks>
/// <para>
/// TorchSharp 0.107's own step writes doubles where its calls take a <see cref="Scalar"/> (<c>mul_(beta1)</c>,
/// <c>addcmul_(g, g, 1 - beta2)</c>, <c>addcdiv_(m, denominator, -step)</c>): each becomes a temporary whose native
/// handle is passed on while nothing keeps the managed object alive. A garbage collection during the native call can
/// then run the temporary's finalizer, which frees the native scalar while the kernel reads it; c10's scalar accessor
/// fails with "Expected false to be true" and the process ends (about one demo run in 60). Here each scalar is a
/// <c>using</c> local, alive until its call has returned. Use it where a training loop would call
/// <c>torch.optim.Adam(parameters, learningRate)</c>.
/// </para>
/// <para>
/// It carries TorchSharp's class name on purpose: a state file starts with the optimizer's class name and is loaded only
/// by a class of that name, so this way its optimizer state files and TorchSharp's Adam's read each other.
/// </para>
/// <para>Weight decay, maximize and AMSGrad are not supported; a step with them set throws <see cref="NotSupportedException"/>.</para>
/// </remarks>
public sealed class Adam : TorchSharp.Modules.Adam
{
    /// <summary>Creates the optimizer over <paramref name="parameters"/> with PyTorch's defaults (β 0.9 and 0.999, ε 1e-8).</summary>
    /// <param name="parameters">The parameters to train.</param>
    /// <param name="learningRate">The learning rate.</param>
    public Adam(IEnumerable<Parameter> parameters, double learningRate)
        : base(parameters, learningRate)
    {
    }

    /// <inheritdoc />
    public override Tensor step(Func<Tensor>? closure = null)
    {
        return _step<ParamGroup>(Step, closure);

        void Step(ParamGroup group)
        {
            var options = group.Options;
            if (options.weight_decay is not (null or 0.0) || options.maximize == true || options.amsgrad == true)
                throw new NotSupportedException("DriftWatch.Hooks.Optimizers.Adam does not support weight decay, maximize or AMSGrad; use torch.optim.Adam for those");
            double beta1 = options.beta1!.Value;
            double beta2 = options.beta2!.Value;
            foreach (var parameter in group.Parameters)
            {
                var gradient = parameter.grad;
                if (gradient is null)
                    continue;
                var state = (State)_state[parameter.Handle];
                state.step++;
                double firstBias = 1 - Math.Pow(beta1, state.step);
                double secondBias = 1 - Math.Pow(beta2, state.step);

                using Scalar keepFirst = beta1, addFirst = 1 - beta1, keepSecond = beta2, addSecond = 1 - beta2;
                using Scalar secondBiasRoot = Math.Sqrt(secondBias), epsilon = options.eps!.Value, one = 1, stepSize = -(options.LearningRate!.Value / firstBias);
                using var conjugate = gradient.conj();

                // m ← β1·m + (1 − β1)·g;  v ← β2·v + (1 − β2)·g²;  θ ← θ − (lr / (1 − β1ᵗ))·m / (√v / √(1 − β2ᵗ) + ε)
                state.exp_avg.mul_(keepFirst).add_(gradient, addFirst);
                state.exp_avg_sq.mul_(keepSecond).addcmul_(gradient, conjugate, addSecond);
                using var root = state.exp_avg_sq.sqrt();
                using var denominator = root.div(secondBiasRoot).add_(epsilon, one);
                parameter.addcdiv_(state.exp_avg, denominator, stepSize);
            }
        }
    }
}
