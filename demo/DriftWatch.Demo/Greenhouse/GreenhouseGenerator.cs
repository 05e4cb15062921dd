using System.Collections.Immutable;
using DriftWatch.Model;
using DriftWatch.Probing;

namespace DriftWatch.Demo.Greenhouse;

/// <summary>Draws the rows of a scenario from its settings.</summary>
internal static class GreenhouseGenerator
{
    private const int DenseCount = 8;
    private const int CategoricalCount = 5;
    private const int Trays = 10;

    public static GreenhouseScenario Generate(ScenarioOptions settings)
    {
        var rule = GrowingRule.Create(settings.Seed, settings.CultivarScale);
        var training = Draw(settings, rule, training: true);
        var validation = Draw(settings, rule, training: false);

        // z-scores with training statistics only, as a careful pipeline would.
        var means = new double[DenseCount];
        var deviations = new double[DenseCount];
        for (int j = 0; j < DenseCount; j++)
        {
            double sum = 0, squares = 0;
            for (int r = 0; r < training.Rows; r++)
                sum += training.RawDense[r * DenseCount + j];
            means[j] = sum / training.Rows;
            for (int r = 0; r < training.Rows; r++)
            {
                double d = training.RawDense[r * DenseCount + j] - means[j];
                squares += d * d;
            }
            deviations[j] = Math.Sqrt(squares / Math.Max(1, training.Rows - 1));
            if (deviations[j] == 0)
                deviations[j] = 1;
        }

        return new GreenhouseScenario(
            settings,
            training.ToSplit("training", means, deviations),
            validation.ToSplit("validation", means, deviations),
            Truth(settings),
            [.. means],
            [.. deviations]);
    }

    private static Drawn Draw(ScenarioOptions settings, GrowingRule rule, bool training)
    {
        int rows = training ? settings.TrainingRows : settings.ValidationRows;
        int stream = training ? 10 : 20;
        // Three streams per set: genuine conditions and grades, noise channels, planted faults. Each row takes the
        // same number of draws from each whatever the variant, so variants with one seed share genuine rows.
        var genuine = Sampling.Stream(settings.Seed, stream + 1);
        var noise = Sampling.Stream(settings.Seed, stream + 2);
        var faults = Sampling.Stream(settings.Seed, stream + 3);
        bool leaked = settings.TrayLeak == TrayLeak.TrainingAndValidation || (settings.TrayLeak == TrayLeak.TrainingOnly && training);
        double flip = training ? settings.FlippedLabelFraction : 0;
        int crateLevels = settings.EffectiveCrateLevels;

        var drawn = new Drawn(rows);
        for (int r = 0; r < rows; r++)
        {
            var g = rule.DrawConditions(genuine);
            double p = rule.PassProbability(g);
            int grade = genuine.NextDouble() < p ? 1 : 0;

            double driftA = Sampling.Normal(noise, 0, 0.8);
            double driftB = noise.NextDouble() * 4 - 2;

            double agree = faults.NextDouble();
            int trayInGroup = faults.Next(Trays / 2);
            int randomTray = faults.Next(Trays);
            int crate = faults.Next(crateLevels);
            bool flipped = faults.NextDouble() < flip;

            int recorded = flipped ? 1 - grade : grade;
            // Trays 0–4 hold failed batches and 5–9 passed ones when the tray is assigned after grading.
            int tray = leaked ? (agree < settings.TrayAgreement ? recorded : 1 - recorded) * (Trays / 2) + trayInGroup : randomTray;

            drawn.RawDense.AddRange([g.Temperature, g.Humidity, g.LightHours, g.Co2, g.Irrigation, g.DaysToHarvest, driftA, driftB]);
            drawn.Categorical.AddRange([g.Bay, g.Cultivar, g.PackingLine, tray, crate]);
            drawn.Labels.Add(recorded);
            drawn.PassProbability.Add((float)p);
            drawn.Flipped.Add(flipped);
        }
        return drawn;
    }

    private static ImmutableArray<FeatureTruth> Truth(ScenarioOptions settings)
    {
        var trayRole = settings.TrayLeak == TrayLeak.None ? FeatureRole.Noise : FeatureRole.Leaked;
        string trayHow = settings.TrayLeak switch
        {
            TrayLeak.TrainingOnly => "assigned after grading (trays 0–4 fail, 5–9 pass) in training rows, at random in validation rows",
            TrayLeak.TrainingAndValidation => "assigned after grading (trays 0–4 fail, 5–9 pass) in training and validation rows",
            _ => "assigned at random",
        };
        var crateRole = settings.MemorisableCrateId ? FeatureRole.MemorisableIdentifier : FeatureRole.Noise;
        string crateHow = settings.MemorisableCrateId
            ? "near-unique, drawn at random from the same range for training and validation rows"
            : "crates reused across many batches, drawn at random";
        return
        [
            Dense(GreenhouseFeatures.AirTemperature, FeatureRole.Genuine, "°C", "normal around 22.5 °C plus the bay's warmth; the rule prefers about 23 °C, more or less by cultivar"),
            Dense(GreenhouseFeatures.Humidity, FeatureRole.Genuine, "%", "normal around 74 %, lower in warm bays; above 75 % it lowers the grade and the benefit of light"),
            Dense(GreenhouseFeatures.LightHours, FeatureRole.Genuine, "h/day", "normal around 14 h/day; more light raises the grade"),
            Dense(GreenhouseFeatures.Co2, FeatureRole.Genuine, "ppm", "normal around 800 ppm; raises the grade, saturating"),
            Dense(GreenhouseFeatures.Irrigation, FeatureRole.Genuine, "L/m²/day", "normal around 4.5 L/m²/day, more in warm bays; best near 5.4"),
            Dense(GreenhouseFeatures.DaysToHarvest, FeatureRole.Genuine, "days", "whole days around 68, later for late cultivars; best at the cultivar's own ripeness day"),
            Dense(GreenhouseFeatures.SensorDriftA, FeatureRole.Noise, "mV", "normal noise, independent of everything"),
            Dense(GreenhouseFeatures.SensorDriftB, FeatureRole.Noise, "mV", "uniform noise, independent of everything"),
            Categorical(GreenhouseFeatures.GreenhouseBay, FeatureRole.Genuine, GrowingRule.Bays, "uniform; each bay has its own effect and warmth"),
            Categorical(GreenhouseFeatures.Cultivar, FeatureRole.Genuine, GrowingRule.Cultivars, "weighted; each cultivar has its own effect, heat tolerance and ripeness day"),
            Categorical(GreenhouseFeatures.PackingLine, FeatureRole.Genuine, GrowingRule.PackingLines, "uniform; each line has a small effect"),
            Categorical(GreenhouseFeatures.InspectionTray, trayRole, Trays, trayHow),
            Categorical(GreenhouseFeatures.CrateId, crateRole, settings.EffectiveCrateLevels, crateHow),
        ];
    }

    private static FeatureTruth Dense(string name, FeatureRole role, string unit, string how) =>
        new(name, FeatureKind.Dense, role, 0, unit, how);

    private static FeatureTruth Categorical(string name, FeatureRole role, int levels, string how) =>
        new(name, FeatureKind.Categorical, role, levels, "", how);

    private sealed class Drawn(int rows)
    {
        public int Rows { get; } = rows;

        public List<double> RawDense { get; } = new(rows * DenseCount);

        public List<long> Categorical { get; } = new(rows * CategoricalCount);

        public List<float> Labels { get; } = new(rows);

        public List<float> PassProbability { get; } = new(rows);

        public List<bool> Flipped { get; } = new(rows);

        public GreenhouseSplit ToSplit(string name, double[] means, double[] deviations)
        {
            var standardised = new float[RawDense.Count];
            for (int i = 0; i < standardised.Length; i++)
                standardised[i] = (float)((RawDense[i] - means[i % DenseCount]) / deviations[i % DenseCount]);
            var rows = new ProbeRows(standardised, DenseCount, [.. Categorical], CategoricalCount, [.. Labels]);
            return new GreenhouseSplit(name, rows, [.. RawDense.Select(v => (float)v)], [.. PassProbability], [.. Flipped]);
        }
    }
}
