using ScottPlot;

namespace DriftWatch.Charts;

/// <summary>
/// Every colour a chart draws, declared here and nowhere else (a convention test checks it). Our own colours, chosen so
/// that no two series colours, nor a series colour and the white background, run together for viewers with a protan,
/// deutan or tritan colour-vision deficiency (checked by simulation in the tests); no library's default cycle and no
/// published named scheme. One orange only, and never a red/green pair: a cool blue means positive, the orange
/// negative and a light grey zero.
/// </summary>
internal static class ChartPalette
{
    /// <summary>Deep blue: positive values, the held-out half, the first series.</summary>
    public static Color Positive { get; } = Color.FromHex("#16407A");

    /// <summary>The one orange: negative values, the training half, the second series.</summary>
    public static Color Negative { get; } = Color.FromHex("#E07B1A");

    /// <summary>Zero: a light grey.</summary>
    public static Color Zero { get; } = Color.FromHex("#D9D9D9");

    /// <summary>The darkest blue of the signed and sequential colour ramps.</summary>
    public static Color DeepPositive { get; } = Color.FromHex("#0B2447");

    /// <summary>The darkest end of the orange ramp (a darker shade of the same orange).</summary>
    public static Color DeepNegative { get; } = Color.FromHex("#6E3507");

    /// <summary>Text and axis lines.</summary>
    public static Color Ink { get; } = Color.FromHex("#222222");

    /// <summary>Secondary text, bounds and verdict marks.</summary>
    public static Color Muted { get; } = Color.FromHex("#666666");

    /// <summary>A mid grey between <see cref="Zero"/> and <see cref="Muted"/> (mixed neurons).</summary>
    public static Color MidGrey { get; } = Color.FromHex("#8C8C8C");

    /// <summary>The picture's background and cells with no value.</summary>
    public static Color Background { get; } = Color.FromHex("#FFFFFF");

    /// <summary>The held-out half's lines.</summary>
    public static Color HeldOut => Positive;

    /// <summary>The training half's lines.</summary>
    public static Color Training => Negative;

    /// <summary>
    /// One colour per series, in the order lines take them: the two half colours first, then colours that differ from
    /// them and each other in lightness as well as hue; the lightest come last.
    /// </summary>
    public static IReadOnlyList<Color> Categorical { get; } =
    [
        Positive,                 // deep blue
        Negative,                 // orange
        Color.FromHex("#1F6E70"), // dark teal
        Color.FromHex("#D27BB2"), // orchid pink
        Color.FromHex("#262626"), // charcoal
        Color.FromHex("#9A88D6"), // lavender
        Color.FromHex("#82CBEF"), // pale sky
        Color.FromHex("#EADF78"), // straw
    ];

    /// <summary>Marker shapes paired with <see cref="Categorical"/>, so lines differ by more than colour.</summary>
    public static IReadOnlyList<MarkerShape> Markers { get; } =
    [
        MarkerShape.FilledCircle,
        MarkerShape.FilledSquare,
        MarkerShape.FilledTriangleUp,
        MarkerShape.FilledDiamond,
        MarkerShape.OpenCircle,
        MarkerShape.OpenSquare,
        MarkerShape.OpenTriangleUp,
        MarkerShape.OpenDiamond,
        MarkerShape.FilledTriangleDown,
        MarkerShape.OpenTriangleDown,
    ];

    /// <summary>The colour of the <paramref name="index"/>-th line.</summary>
    public static Color Line(int index) => Categorical[index % Categorical.Count];

    /// <summary>The marker of the <paramref name="index"/>-th line; cycles at a different period than the colours.</summary>
    public static MarkerShape Marker(int index) => Markers[index % Markers.Count];
}
