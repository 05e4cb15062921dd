using System.Collections.Immutable;
using System.Globalization;

namespace DriftWatch.Attribution;

/// <summary>Reads a method's stored settings back, naming the method, the key, the value and what would be valid.</summary>
internal sealed class MethodSettingsReader
{
    private readonly string _method;
    private readonly IReadOnlyDictionary<string, string> _settings;
    private readonly HashSet<string> _read = new(StringComparer.Ordinal);

    public MethodSettingsReader(string method, IReadOnlyDictionary<string, string> settings)
    {
        ArgumentNullException.ThrowIfNull(settings);
        _method = method;
        _settings = settings;
    }

    public int Int(string key, int defaultValue, int minimum, int maximum)
    {
        if (!TryGet(key, out string text))
            return defaultValue;
        if (!int.TryParse(text, NumberStyles.Integer, CultureInfo.InvariantCulture, out int value) || value < minimum || value > maximum)
            throw Bad(key, text, $"a whole number between {minimum} and {maximum}");
        return value;
    }

    public double Double(string key, double defaultValue, double minimum, double maximum)
    {
        if (!TryGet(key, out string text))
            return defaultValue;
        if (!double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out double value) || !(value >= minimum && value <= maximum))
            throw Bad(key, text, string.Create(CultureInfo.InvariantCulture, $"a number between {minimum} and {maximum}"));
        return value;
    }

    public bool Bool(string key, bool defaultValue)
    {
        if (!TryGet(key, out string text))
            return defaultValue;
        return text switch
        {
            "true" => true,
            "false" => false,
            _ => throw Bad(key, text, "true or false"),
        };
    }

    public TEnum Enum<TEnum>(string key, TEnum defaultValue)
        where TEnum : struct, Enum
    {
        if (!TryGet(key, out string text))
            return defaultValue;
        if (!System.Enum.TryParse(text, ignoreCase: false, out TEnum value) || !System.Enum.IsDefined(value) || int.TryParse(text, out _))
            throw Bad(key, text, "one of " + string.Join(", ", System.Enum.GetNames<TEnum>()));
        return value;
    }

    /// <summary>Throws when a setting was given that the method does not read.</summary>
    public void RejectUnknown()
    {
        var unknown = _settings.Keys.Where(k => !_read.Contains(k)).Order(StringComparer.Ordinal).FirstOrDefault();
        if (unknown is null)
            return;
        string known = _read.Count == 0 ? "it takes no settings" : "its settings: " + string.Join(", ", _read.Order(StringComparer.Ordinal));
        throw new DriftWatchException($"method '{_method}' has no setting '{unknown}'; {known}");
    }

    public static string Text(int value) => value.ToString(CultureInfo.InvariantCulture);

    public static string Text(double value) => value.ToString("R", CultureInfo.InvariantCulture);

    public static string Text(bool value) => value ? "true" : "false";

    public static ImmutableSortedDictionary<string, string> Of(params (string Key, string Value)[] pairs) =>
        ImmutableSortedDictionary.CreateRange(StringComparer.Ordinal, pairs.Select(p => KeyValuePair.Create(p.Key, p.Value)));

    private bool TryGet(string key, out string text)
    {
        _read.Add(key);
        return _settings.TryGetValue(key, out text!);
    }

    private DriftWatchException Bad(string key, string text, string valid) =>
        new($"method '{_method}': setting '{key}' must be {valid}; got '{text}'");
}
