using System.Globalization;

namespace DriftWatch.Cli;

/// <summary>How numbers and times appear in console output; invariant culture throughout.</summary>
internal static class Formats
{
    /// <summary>A loss: four decimals, scientific when very small or large, "-" when missing.</summary>
    public static string Loss(double? value) => value switch
    {
        null => "-",
        double v when !double.IsFinite(v) => v.ToString(CultureInfo.InvariantCulture),
        double v when v == 0 || Math.Abs(v) is >= 0.001 and < 100_000 => v.ToString("0.0000", CultureInfo.InvariantCulture),
        double v => v.ToString("0.00e+0", CultureInfo.InvariantCulture),
    };

    /// <summary>A share as a percentage with one decimal.</summary>
    public static string Percent(double share) =>
        double.IsFinite(share) ? (share * 100).ToString("0.0", CultureInfo.InvariantCulture) + "%" : share.ToString(CultureInfo.InvariantCulture);

    /// <summary>A difference of shares in percentage points, always signed.</summary>
    public static string Points(double difference) =>
        double.IsFinite(difference) ? (difference * 100).ToString("+0.0;-0.0;0.0", CultureInfo.InvariantCulture) : difference.ToString(CultureInfo.InvariantCulture);

    /// <summary>A time in UTC to the minute; a local time (as LiteDB may hand one back) is converted first.</summary>
    public static string Utc(DateTime time) =>
        (time.Kind == DateTimeKind.Local ? time.ToUniversalTime() : time).ToString("yyyy-MM-dd HH:mm", CultureInfo.InvariantCulture);

    /// <summary>An integer.</summary>
    public static string Integer(int value) => value.ToString(CultureInfo.InvariantCulture);
}
