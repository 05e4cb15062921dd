using System.Collections.Immutable;
using System.Runtime.InteropServices;

namespace DriftWatch.Attribution;

/// <summary>How a path integral over α ∈ [0, 1] is approximated.</summary>
public enum QuadratureRule
{
    /// <summary>Riemann sum at the midpoints (k + ½)/n, equal weights.</summary>
    RiemannMidpoint,

    /// <summary>Trapezoid rule on n equally spaced points including both ends.</summary>
    RiemannTrapezoid,

    /// <summary>Gauss–Legendre nodes and weights: exact for polynomials of degree 2n − 1.</summary>
    GaussLegendre,
}

/// <summary>Nodes and weights of a rule on [0, 1]; the weights sum to 1.</summary>
/// <param name="Nodes">Points α in [0, 1].</param>
/// <param name="Weights">Weights, one per node.</param>
public sealed record Quadrature(ImmutableArray<double> Nodes, ImmutableArray<double> Weights)
{
    /// <summary>Builds the <paramref name="rule"/> with <paramref name="points"/> nodes.</summary>
    public static Quadrature Create(QuadratureRule rule, int points)
    {
        int min = rule == QuadratureRule.RiemannTrapezoid ? 2 : 1;
        if (points < min || points > 4096)
            throw new DriftWatchException($"steps must be between {min} and 4096 for {rule}; got {points}");
        return rule switch
        {
            QuadratureRule.RiemannMidpoint => Midpoint(points),
            QuadratureRule.RiemannTrapezoid => Trapezoid(points),
            QuadratureRule.GaussLegendre => GaussLegendre(points),
            _ => throw new ArgumentOutOfRangeException(nameof(rule), rule, "unknown quadrature rule"),
        };
    }

    private static Quadrature Midpoint(int n)
    {
        var nodes = new double[n];
        var weights = new double[n];
        for (int k = 0; k < n; k++)
        {
            nodes[k] = (k + 0.5) / n;
            weights[k] = 1.0 / n;
        }
        return new Quadrature(ImmutableCollectionsMarshal.AsImmutableArray(nodes), ImmutableCollectionsMarshal.AsImmutableArray(weights));
    }

    private static Quadrature Trapezoid(int n)
    {
        var nodes = new double[n];
        var weights = new double[n];
        for (int k = 0; k < n; k++)
        {
            nodes[k] = (double)k / (n - 1);
            weights[k] = (k == 0 || k == n - 1 ? 0.5 : 1.0) / (n - 1);
        }
        return new Quadrature(ImmutableCollectionsMarshal.AsImmutableArray(nodes), ImmutableCollectionsMarshal.AsImmutableArray(weights));
    }

    // Newton's iteration on the Legendre polynomial P_n from Chebyshev-like starting points, then mapped from
    // [-1, 1] to [0, 1]; converges to machine precision in a few steps for the n we use.
    private static Quadrature GaussLegendre(int n)
    {
        var nodes = new double[n];
        var weights = new double[n];
        for (int i = 0; i < (n + 1) / 2; i++)
        {
            double z = Math.Cos(Math.PI * (i + 0.75) / (n + 0.5));
            double derivative;
            for (int iteration = 0; ; iteration++)
            {
                double p1 = 1, p2 = 0;
                for (int j = 1; j <= n; j++)
                {
                    double p3 = p2;
                    p2 = p1;
                    p1 = ((2 * j - 1) * z * p2 - (j - 1) * p3) / j;
                }
                derivative = n * (z * p1 - p2) / (z * z - 1);
                double step = p1 / derivative;
                z -= step;
                if (Math.Abs(step) < 1e-15 || iteration > 100)
                    break;
            }
            double w = 2 / ((1 - z * z) * derivative * derivative);
            nodes[i] = (1 - z) / 2;
            nodes[n - 1 - i] = (1 + z) / 2;
            weights[i] = weights[n - 1 - i] = w / 2;
        }
        return new Quadrature(ImmutableCollectionsMarshal.AsImmutableArray(nodes), ImmutableCollectionsMarshal.AsImmutableArray(weights));
    }
}
