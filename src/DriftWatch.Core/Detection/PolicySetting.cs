using System.Collections.Immutable;
using System.Globalization;
using System.Text.Json;
using DriftWatch.Options;

namespace DriftWatch.Detection;

/// <summary>
/// One setting of the <see cref="GatePolicy"/>: its JSON key, the property that holds it, the values it accepts and what it
/// means. <see cref="GatePolicy.Settings"/> lists them all; reading, writing, help text and validation all come from there.
/// </summary>
public sealed class PolicySetting
{
    private readonly Func<GatePolicy, object> _value;
    private readonly Func<GatePolicy, JsonElement, GatePolicy?> _read;

    private PolicySetting(string key, string property, string allowed, string meaning, Func<GatePolicy, object> value, Func<GatePolicy, JsonElement, GatePolicy?> read)
    {
        Key = key;
        Property = property;
        Allowed = allowed;
        Meaning = meaning;
        _value = value;
        _read = read;
    }

    /// <summary>The setting's key in a policy file, e.g. <c>patience</c>.</summary>
    public string Key { get; }

    /// <summary>The name of the <see cref="GatePolicy"/> property that holds it, e.g. <c>Patience</c>.</summary>
    public string Property { get; }

    /// <summary>The values it accepts, in words, e.g. <c>integer ≥ 1</c>.</summary>
    public string Allowed { get; }

    /// <summary>What the setting means, one sentence.</summary>
    public string Meaning { get; }

    /// <summary>The built-in value as a policy file writes it, e.g. <c>2</c> or <c>["Leak", "Overfitting"]</c>.</summary>
    public string DefaultText => Text(GatePolicy.Default);

    internal IntegerRange? Integers { get; private init; }

    internal NumberRange? Numbers { get; private init; }

    /// <summary>The setting's value in <paramref name="policy"/> as a policy file writes it.</summary>
    public string Text(GatePolicy policy)
    {
        ArgumentNullException.ThrowIfNull(policy);
        return JsonSerializer.Serialize(Value(policy)).Replace(",", ", ", StringComparison.Ordinal);
    }

    /// <summary>The one-line message for a value this setting does not accept.</summary>
    public string Problem(string given) => $"'{Key}' must be {Allowed}; got {given}";

    /// <summary>An integer setting.</summary>
    internal static PolicySetting Integer(string property, string key, IntegerRange range, Func<GatePolicy, int> get, Func<GatePolicy, int, GatePolicy> set, string meaning) =>
        new(key, property, range.Text, meaning, p => get(p),
            (p, v) => v.ValueKind == JsonValueKind.Number && v.TryGetInt32(out int i) && range.Contains(i) ? set(p, i) : null)
        { Integers = range };

    /// <summary>A number setting; NaN and infinities are never accepted.</summary>
    internal static PolicySetting Number(string property, string key, NumberRange range, Func<GatePolicy, double> get, Func<GatePolicy, double, GatePolicy> set, string meaning) =>
        new(key, property, range.Text, meaning, p => get(p),
            (p, v) => v.ValueKind == JsonValueKind.Number && v.TryGetDouble(out double d) && range.Contains(d) ? set(p, d) : null)
        { Numbers = range };

    /// <summary>A true-or-false setting.</summary>
    internal static PolicySetting Switch(string property, string key, Func<GatePolicy, bool> get, Func<GatePolicy, bool, GatePolicy> set, string meaning) =>
        new(key, property, "true or false", meaning, p => get(p),
            (p, v) => v.ValueKind is JsonValueKind.True or JsonValueKind.False ? set(p, v.GetBoolean()) : null);

    /// <summary>A setting holding finding kinds by their stored names (any of them, in any order, repeats allowed).</summary>
    internal static PolicySetting Kinds(string property, string key, Func<GatePolicy, ImmutableArray<FindingKind>> get, Func<GatePolicy, ImmutableArray<FindingKind>, GatePolicy> set, string meaning) =>
        new(key, property, "array of " + string.Join(", ", FindingKinds.Names), meaning, p => get(p).Select(FindingKinds.NameOf).ToArray(),
            (p, v) => ReadKinds(v) is { IsDefault: false } kinds ? set(p, kinds) : null);

    /// <summary>The value as <see cref="GatePolicy.ToJson"/> serialises it (int, double, bool or string[]).</summary>
    internal object Value(GatePolicy policy) => _value(policy);

    /// <summary>The policy with this setting read from <paramref name="value"/>; null when the value is not accepted.</summary>
    internal GatePolicy? Read(GatePolicy policy, JsonElement value) => _read(policy, value);

    /// <summary>The value, when the setting accepts it.</summary>
    /// <exception cref="DriftWatchException">Out of range; the message is the one a policy file gets.</exception>
    internal int Check(int value) =>
        Integers!.Contains(value) ? value : throw new DriftWatchException(Problem(value.ToString(CultureInfo.InvariantCulture)));

    /// <inheritdoc cref="Check(int)"/>
    internal double Check(double value) =>
        Numbers!.Contains(value) ? value : throw new DriftWatchException(Problem(NumberRange.Words(value)));

    /// <inheritdoc cref="Check(int)"/>
    internal ImmutableArray<FindingKind> Check(ImmutableArray<FindingKind> kinds)
    {
        if (kinds.IsDefault)
            throw new DriftWatchException(Problem("no array (a default ImmutableArray); use [] for none"));
        if (kinds.Any(k => !FindingKinds.TryParse(FindingKinds.NameOf(k), out _)))
            throw new DriftWatchException(Problem("[" + string.Join(", ", kinds.Select(FindingKinds.NameOf)) + "]"));
        return kinds;
    }

    private static ImmutableArray<FindingKind> ReadKinds(JsonElement value)
    {
        if (value.ValueKind != JsonValueKind.Array)
            return default;
        var kinds = ImmutableArray.CreateBuilder<FindingKind>();
        foreach (var item in value.EnumerateArray())
        {
            if (item.ValueKind != JsonValueKind.String || !FindingKinds.TryParse(item.GetString(), out FindingKind kind))
                return default;
            kinds.Add(kind);
        }
        return kinds.ToImmutable();
    }
}
