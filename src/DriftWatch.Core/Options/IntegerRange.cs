using System.Globalization;

namespace DriftWatch.Options;

/// <summary>The values a whole-number setting accepts, with the words that name them in help text and messages.</summary>
/// <remarks>Build one with <see cref="Any"/>, <see cref="AtLeast"/> or <see cref="Between"/>; <c>with</c> changes the words.</remarks>
public sealed record IntegerRange
{
    private readonly string? _rule;

    private IntegerRange(long minimum, long maximum, string text)
    {
        Minimum = minimum;
        Maximum = maximum;
        Text = text;
    }

    /// <summary>Every 32-bit integer.</summary>
    public static IntegerRange Any { get; } = new(int.MinValue, int.MaxValue, "integer");

    /// <summary>The smallest value accepted.</summary>
    public long Minimum { get; }

    /// <summary>The largest value accepted.</summary>
    public long Maximum { get; }

    /// <summary>What the accepted values are, in words for help text, e.g. <c>integer ≥ 1</c>.</summary>
    public string Text { get; init; }

    /// <summary>The phrase a message puts after the setting's name. Default: "must be " and <see cref="Text"/>.</summary>
    public string Rule
    {
        get => _rule ?? "must be " + Text;
        init => _rule = value;
    }

    /// <summary>The integers from <paramref name="minimum"/> up.</summary>
    public static IntegerRange AtLeast(long minimum) =>
        new(minimum, long.MaxValue, "integer ≥ " + minimum.ToString(CultureInfo.InvariantCulture));

    /// <summary>The integers from <paramref name="minimum"/> to <paramref name="maximum"/>, both included.</summary>
    public static IntegerRange Between(long minimum, long maximum) =>
        new(minimum, maximum, $"integer between {minimum.ToString(CultureInfo.InvariantCulture)} and {maximum.ToString(CultureInfo.InvariantCulture)}");

    /// <summary>Whether the range holds the value.</summary>
    public bool Contains(long value) => value >= Minimum && value <= Maximum;

    /// <summary>The one-line message for a value outside the range: the setting, the rule and what was given.</summary>
    public string Problem(string label, string given) => $"{label} {Rule}; got {given}";

    /// <summary>The value when the range holds it.</summary>
    /// <exception cref="DriftWatchException">The value is outside the range; the message names <paramref name="label"/>.</exception>
    public int Check(int value, string label) =>
        Contains(value) ? value : throw new DriftWatchException(Problem(label, value.ToString(CultureInfo.InvariantCulture)));

    /// <inheritdoc cref="Check(int, string)"/>
    public long Check(long value, string label) =>
        Contains(value) ? value : throw new DriftWatchException(Problem(label, value.ToString(CultureInfo.InvariantCulture)));
}
