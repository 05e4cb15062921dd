namespace DriftWatch.Demo.Greenhouse;

/// <summary>
/// The known grading rule: a batch passes with probability σ(gain · (score − intercept)), where the score is an
/// interaction-rich function of the genuine features and the per-level effects are drawn from the seed.
/// </summary>
/// <remarks>
/// The score, with t = (temperature − 23 °C)/2.5, h = (humidity − 75 %)/8, l = (light − 14 h)/2,
/// c = (CO₂ − 800 ppm)/200, w = (irrigation − 4.5 L/m²/day)/1 and r = (days − 68)/7 − lateness[cultivar]:
/// 1.2 (0.8 − t²) + 0.6 heatTolerance[cultivar] t + 0.8 l − 0.5 l h − 0.7 max(h, 0) + 0.6 tanh(1.5 c)
/// + 0.6 w − 0.35 w² + 0.5 − 0.45 r² + bay[bay] + cultivar[cultivar] + line[line].
/// The intercept is the median score of a fixed sample, so classes are balanced; the logistic draw is the label noise.
/// </remarks>
internal sealed class GrowingRule
{
    public const int Bays = 12;
    public const int Cultivars = 6;
    public const int PackingLines = 4;
    public const double Gain = 1.6;

    private GrowingRule(Random world)
    {
        BayWarmth = Draw(Bays, () => Sampling.Normal(world, 0, 0.9));
        BayEffect = Draw(Bays, () => Sampling.Normal(world, 0, 0.45));
        CultivarEffect = Draw(Cultivars, () => Sampling.Normal(world, 0, 0.55));
        CultivarHeatTolerance = Draw(Cultivars, () => world.NextDouble() * 2 - 1);
        CultivarLateness = Draw(Cultivars, () => world.NextDouble() * 2 - 1);
        LineEffect = Draw(PackingLines, () => Sampling.Normal(world, 0, 0.35));
    }

    /// <summary>How much warmer than the house average each bay runs, °C.</summary>
    public double[] BayWarmth { get; }

    public double[] BayEffect { get; }

    public double[] CultivarEffect { get; }

    public double[] CultivarHeatTolerance { get; }

    public double[] CultivarLateness { get; }

    public double[] LineEffect { get; }

    /// <summary>How common each cultivar is.</summary>
    public static IReadOnlyList<double> CultivarWeights { get; } = [0.26, 0.21, 0.17, 0.14, 0.12, 0.10];

    public double Intercept { get; private set; }

    /// <summary>Draws the per-level effects, then fixes the intercept from a sample of its own stream.</summary>
    /// <param name="seed">The scenario's seed.</param>
    /// <param name="cultivarScale">Multiplies every cultivar's effect; above 1 makes cultivar a strong genuine feature.</param>
    public static GrowingRule Create(int seed, double cultivarScale = 1)
    {
        var rule = new GrowingRule(Sampling.Stream(seed, 0));
        for (int c = 0; c < rule.CultivarEffect.Length; c++)
            rule.CultivarEffect[c] *= cultivarScale;
        var sample = Sampling.Stream(seed, 1);
        var scores = new double[4000];
        for (int i = 0; i < scores.Length; i++)
            scores[i] = rule.Score(rule.DrawConditions(sample));
        Array.Sort(scores);
        rule.Intercept = (scores[scores.Length / 2 - 1] + scores[scores.Length / 2]) / 2;
        return rule;
    }

    /// <summary>Draws one batch's growing conditions; the number of draws is fixed.</summary>
    public GrowingConditions DrawConditions(Random random)
    {
        int bay = random.Next(Bays);
        int cultivar = Sampling.Weighted(random, CultivarWeights);
        int line = random.Next(PackingLines);
        double temperature = Sampling.ClippedNormal(random, 22.5 + BayWarmth[bay], 2.2, 15, 31);
        // Warmer bays run drier and are watered more, so the genuine features are correlated as in a real house.
        double humidity = Sampling.ClippedNormal(random, 74 - 1.5 * (temperature - 22.5), 7.5, 45, 97);
        double light = Sampling.ClippedNormal(random, 14, 1.8, 9, 18);
        double co2 = Sampling.ClippedNormal(random, 800, 170, 380, 1400);
        double irrigation = Sampling.ClippedNormal(random, 4.5 + 0.25 * (temperature - 22.5), 1.0, 1.5, 8);
        double days = Math.Round(Sampling.ClippedNormal(random, 68 + 7 * CultivarLateness[cultivar], 7, 48, 95));
        return new GrowingConditions(temperature, humidity, light, co2, irrigation, days, bay, cultivar, line);
    }

    /// <summary>The score before the intercept.</summary>
    public double Score(GrowingConditions g)
    {
        double t = (g.Temperature - 23) / 2.5;
        double h = (g.Humidity - 75) / 8;
        double l = (g.LightHours - 14) / 2;
        double c = (g.Co2 - 800) / 200;
        double w = (g.Irrigation - 4.5) / 1.0;
        double r = (g.DaysToHarvest - 68) / 7 - CultivarLateness[g.Cultivar];
        return 1.2 * (0.8 - t * t) + 0.6 * CultivarHeatTolerance[g.Cultivar] * t
            + 0.8 * l - 0.5 * l * h - 0.7 * Math.Max(h, 0)
            + 0.6 * Math.Tanh(1.5 * c)
            + 0.6 * w - 0.35 * w * w
            + 0.5 - 0.45 * r * r
            + BayEffect[g.Bay] + CultivarEffect[g.Cultivar] + LineEffect[g.PackingLine];
    }

    /// <summary>The true probability that the batch passes.</summary>
    public double PassProbability(GrowingConditions g) => Sampling.Sigmoid(Gain * (Score(g) - Intercept));

    private static double[] Draw(int count, Func<double> draw)
    {
        var values = new double[count];
        for (int i = 0; i < count; i++)
            values[i] = draw();
        return values;
    }
}

/// <summary>One batch's genuine inputs in raw units.</summary>
internal readonly record struct GrowingConditions(
    double Temperature,
    double Humidity,
    double LightHours,
    double Co2,
    double Irrigation,
    double DaysToHarvest,
    int Bay,
    int Cultivar,
    int PackingLine);
