using System.Collections.Immutable;

namespace DriftWatch.Attribution;

/// <summary>The built-in attribution methods by stored name, so a method can be rebuilt from the name and settings a run recorded.</summary>
public static class AttributionMethods
{
    private static readonly ImmutableSortedDictionary<string, Func<IReadOnlyDictionary<string, string>, IAttributionMethod>> Builders =
        ImmutableSortedDictionary.CreateRange(
            StringComparer.Ordinal,
            new KeyValuePair<string, Func<IReadOnlyDictionary<string, string>, IAttributionMethod>>[]
            {
                new("integrated-gradients", IntegratedGradientsFromSettings),
                new("integrated-gradients-adaptive", AdaptiveIntegratedGradientsFromSettings),
                new("gradient-x-input", s => NoSettings("gradient-x-input", s, new GradientTimesInput())),
                new("saliency", s => NoSettings("saliency", s, new Saliency())),
                new("feature-ablation", FeatureAblation.FromSettings),
                new("shapley-sampling", ShapleySampling.FromSettings),
                new("shapley-exact", s => NoSettings("shapley-exact", s, new ExactShapley())),
                new("smoothgrad", s => SmoothGrad.FromSettings(s, SmoothGradVariant.Gradient)),
                new("smoothgrad-x-input", s => SmoothGrad.FromSettings(s, SmoothGradVariant.GradientTimesInput)),
            });

    /// <summary>Every built-in method's name, in ordinal order.</summary>
    public static ImmutableArray<string> Names { get; } = [.. Builders.Keys];

    /// <summary>Builds the method called <paramref name="name"/> with <paramref name="settings"/>; settings left out keep their defaults.</summary>
    /// <exception cref="DriftWatchException">An unknown name, an unknown setting or a value out of range; the message lists what is valid.</exception>
    public static IAttributionMethod Create(string name, IReadOnlyDictionary<string, string> settings)
    {
        ArgumentNullException.ThrowIfNull(name);
        ArgumentNullException.ThrowIfNull(settings);
        if (!Builders.TryGetValue(name, out var build))
            throw new DriftWatchException($"unknown attribution method '{name}'; built-in methods: {string.Join(", ", Names)}");
        return build(settings);
    }

    private static IntegratedGradients IntegratedGradientsFromSettings(IReadOnlyDictionary<string, string> settings)
    {
        var read = new MethodSettingsReader("integrated-gradients", settings);
        var rule = read.Enum("quadrature", QuadratureRule.RiemannMidpoint);
        int steps = read.Int("steps", 64, 1, 4096);
        read.RejectUnknown();
        return new IntegratedGradients(steps, rule);
    }

    private static AdaptiveIntegratedGradients AdaptiveIntegratedGradientsFromSettings(IReadOnlyDictionary<string, string> settings)
    {
        const string name = "integrated-gradients-adaptive";
        var read = new MethodSettingsReader(name, settings);
        int initial = read.Int("initial-steps", 16, 1, 4096);
        int maximum = read.Int("maximum-steps", 256, 1, 4096);
        double tolerance = read.Double("tolerance", 0.01, 0, 1);
        if (read.Enum("quadrature", QuadratureRule.RiemannMidpoint) != QuadratureRule.RiemannMidpoint)
            throw new DriftWatchException($"{name} refines midpoint steps only; give quadrature {nameof(QuadratureRule.RiemannMidpoint)} or leave it out");
        read.RejectUnknown();
        return new AdaptiveIntegratedGradients(initial, maximum, tolerance);
    }

    private static IAttributionMethod NoSettings(string name, IReadOnlyDictionary<string, string> settings, IAttributionMethod method)
    {
        new MethodSettingsReader(name, settings).RejectUnknown();
        return method;
    }
}
