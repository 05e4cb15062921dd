namespace DriftWatch.Demo.Greenhouse;

/// <summary>The names of the greenhouse scenario's features, in the order the model lays out their columns.</summary>
public static class GreenhouseFeatures
{
    /// <summary>Mean air temperature over the growing period, °C.</summary>
    public const string AirTemperature = "air temperature";

    /// <summary>Mean relative humidity, %.</summary>
    public const string Humidity = "humidity";

    /// <summary>Light (natural plus supplementary), hours per day.</summary>
    public const string LightHours = "light hours";

    /// <summary>Mean CO₂ concentration, ppm.</summary>
    public const string Co2 = "co2";

    /// <summary>Irrigation volume, litres per square metre per day.</summary>
    public const string Irrigation = "irrigation";

    /// <summary>Days from planting to harvest.</summary>
    public const string DaysToHarvest = "days to harvest";

    /// <summary>A drifting sensor channel with no bearing on the grade.</summary>
    public const string SensorDriftA = "sensor drift a";

    /// <summary>A second drifting sensor channel with no bearing on the grade.</summary>
    public const string SensorDriftB = "sensor drift b";

    /// <summary>The greenhouse bay the batch grew in.</summary>
    public const string GreenhouseBay = "greenhouse bay";

    /// <summary>The tomato cultivar.</summary>
    public const string Cultivar = "cultivar";

    /// <summary>The packing line the batch went through.</summary>
    public const string PackingLine = "packing line";

    /// <summary>The tray the batch was put on at inspection, after grading: the planted leak.</summary>
    public const string InspectionTray = "inspection tray";

    /// <summary>The crate the batch was shipped in: the planted identifier.</summary>
    public const string CrateId = "crate id";

    /// <summary>Dense features in column order.</summary>
    public static IReadOnlyList<string> Dense { get; } =
        [AirTemperature, Humidity, LightHours, Co2, Irrigation, DaysToHarvest, SensorDriftA, SensorDriftB];

    /// <summary>Categorical features in column order (after the dense ones).</summary>
    public static IReadOnlyList<string> Categorical { get; } =
        [GreenhouseBay, Cultivar, PackingLine, InspectionTray, CrateId];
}
