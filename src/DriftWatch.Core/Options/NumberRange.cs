using System.Globalization;

namespace DriftWatch.Options;

/// <summary>The finite numbers a setting accepts (an interval, each end open or closed), with the words that name them.</summary>
/// <remarks>Build one with <see cref="Above"/>, <see cref="AtLeast"/> or <see cref="Interval"/>; <c>with</c> changes the words.</remarks>
public sealed record NumberRange
{
    private readonly string? _rule;

    private NumberRange(double minimum, bool includesMinimum, double maximum, bool includesMaximum, string text)
    {
        Minimum = minimum;
        IncludesMinimum = includesMinimum;
        Maximum = maximum;
        IncludesMaximum = includesMaximum;
        Text = text;
    }

    /// <summary>The lower end.</summary>
    public double Minimum { get; }

    /// <summary>Whether the lower end itself is accepted.</summary>
    public bool IncludesMinimum { get; }

    /// <summary>The upper end (infinity when there is none; infinity itself is never accepted).</summary>
    public double Maximum { get; }

    /// <summary>Whether the upper end itself is accepted.</summary>
    public bool IncludesMaximum { get; }

    /// <summary>What the accepted values are, in words for help text, e.g. <c>number in (0, 1]</c>.</summary>
    public string Text { get; init; }

    /// <summary>The phrase a message puts after the setting's name. Default: "must be " and <see cref="Text"/>.</summary>
    public string Rule
    {
        get => _rule ?? "must be " + Text;
        init => _rule = value;
    }

    /// <summary>The finite numbers greater than <paramref name="minimum"/>.</summary>
    public static NumberRange Above(double minimum) =>
        new(minimum, false, double.PositiveInfinity, false, "number > " + Words(minimum));

    /// <summary>The finite numbers from <paramref name="minimum"/> up.</summary>
    public static NumberRange AtLeast(double minimum) =>
        new(minimum, true, double.PositiveInfinity, false, "number ≥ " + Words(minimum));

    /// <summary>The numbers between two ends, each included or not, written as an interval, e.g. <c>number in (0, 1]</c>.</summary>
    public static NumberRange Interval(double minimum, bool includesMinimum, double maximum, bool includesMaximum) =>
        new(minimum, includesMinimum, maximum, includesMaximum,
            $"number in {(includesMinimum ? '[' : '(')}{Words(minimum)}, {Words(maximum)}{(includesMaximum ? ']' : ')')}");

    /// <summary>Whether the range holds the value; NaN and infinities never are.</summary>
    public bool Contains(double value) =>
        double.IsFinite(value)
        && (IncludesMinimum ? value >= Minimum : value > Minimum)
        && (IncludesMaximum ? value <= Maximum : value < Maximum);

    /// <summary>The one-line message for a value outside the range: the setting, the rule and what was given.</summary>
    public string Problem(string label, string given) => $"{label} {Rule}; got {given}";

    /// <summary>The value when the range holds it.</summary>
    /// <exception cref="DriftWatchException">The value is outside the range; the message names <paramref name="label"/>.</exception>
    public double Check(double value, string label) =>
        Contains(value) ? value : throw new DriftWatchException(Problem(label, Words(value)));

    /// <summary>A number as messages and files write it (invariant culture, shortest round-trip form).</summary>
    public static string Words(double value) => value.ToString("R", CultureInfo.InvariantCulture);
}
