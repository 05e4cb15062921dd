using ScottPlot;

namespace DriftWatch.Charts;

/// <summary>Colours of every chart: colour-blind-safe, never a red/green pair.</summary>
internal static class ChartPalette
{
    /// <summary>Positive values.</summary>
    public static Color Positive { get; } = Color.FromHex("#1F77B4");

    /// <summary>Negative values.</summary>
    public static Color Negative { get; } = Color.FromHex("#FF7F0E");

    /// <summary>Zero.</summary>
    public static Color Zero { get; } = Color.FromHex("#D9D9D9");

    /// <summary>Text and axis lines.</summary>
    public static Color Ink { get; } = Color.FromHex("#222222");

    /// <summary>Secondary text and verdict marks.</summary>
    public static Color Muted { get; } = Color.FromHex("#666666");

    /// <summary>
    /// One colour per feature line: the Okabe–Ito palette (Okabe and Ito 2008, "Color Universal Design"),
    /// reordered so the first lines get the most distinct colours and yellow, the hardest on white, comes last.
    /// </summary>
    public static IReadOnlyList<Color> Categorical { get; } =
    [
        Color.FromHex("#0072B2"), // blue
        Color.FromHex("#E69F00"), // orange
        Color.FromHex("#009E73"), // bluish green
        Color.FromHex("#CC79A7"), // reddish purple
        Color.FromHex("#56B4E9"), // sky blue
        Color.FromHex("#D55E00"), // vermillion
        Color.FromHex("#000000"), // black
        Color.FromHex("#B8A000"), // yellow, darkened from #F0E442 so it reads on white
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
