using System.Text.RegularExpressions;
using DriftWatch.Charts;
using Xunit;

namespace DriftWatch.Tests.Charts;

/// <summary>
/// The palette under simulated colour-vision deficiency: Machado, Oliveira and Fernandes (2009), "A Physiologically-based
/// Model for Simulation of Color Vision Deficiency", IEEE TVCG 15(6), the matrices of their table for severity 1.0
/// (protanopia, deuteranopia, tritanopia), applied to linear RGB (values from memory of that table).
/// </summary>
public sealed partial class ChartPaletteTests
{
    // The smallest CIE 1976 ΔE*ab allowed between two series colours, or a series colour and the white background, under
    // normal vision and each simulated deficiency. 15 is well above the ~2.3 of a just-noticeable difference (Sharma 2003,
    // from memory); the palette's own minimum is about 17.8 (tritan, deep blue against dark teal).
    private const double MinimumDistance = 15;

    private static readonly Dictionary<string, double[,]> Deficiencies = new()
    {
        ["normal"] = new double[,] { { 1, 0, 0 }, { 0, 1, 0 }, { 0, 0, 1 } },
        ["protan"] = new[,] { { 0.152286, 1.052583, -0.204868 }, { 0.114503, 0.786281, 0.099216 }, { -0.003882, -0.048116, 1.051998 } },
        ["deutan"] = new[,] { { 0.367322, 0.860646, -0.227968 }, { 0.280085, 0.672501, 0.047413 }, { -0.011820, 0.042940, 0.968881 } },
        ["tritan"] = new[,] { { 1.255528, -0.076749, -0.178779 }, { -0.078411, 0.930809, 0.147602 }, { 0.004733, 0.691367, 0.303900 } },
    };

    [Fact]
    public void SeriesColoursStayApartUnderEverySimulatedDeficiency()
    {
        var colours = ChartPalette.Categorical.Append(ChartPalette.Background).ToList();
        foreach (var (name, matrix) in Deficiencies)
        {
            var lab = colours.Select(c => Lab(Simulate(c, matrix))).ToList();
            for (int i = 0; i < lab.Count; i++)
            {
                for (int j = i + 1; j < lab.Count; j++)
                {
                    double distance = DeltaE(lab[i], lab[j]);
                    Assert.True(distance >= MinimumDistance, $"{name}: {colours[i].ToHex()} and {colours[j].ToHex()} are ΔE {distance:F1} apart, below {MinimumDistance}");
                }
            }
        }
    }

    [Fact]
    public void SignedColoursAreACoolPositiveAWarmNegativeAndALightGreyZeroWithOneOrange()
    {
        // Hue angles of the CIE L*a*b* colour (common practice): blue near 260–300°, orange near 40–80°.
        var (lp, ap, bp) = Lab(Simulate(ChartPalette.Positive, Deficiencies["normal"]));
        var (_, an, bn) = Lab(Simulate(ChartPalette.Negative, Deficiencies["normal"]));
        var (lz, az, bz) = Lab(Simulate(ChartPalette.Zero, Deficiencies["normal"]));
        double Hue(double a, double b) => (Math.Atan2(b, a) * 180 / Math.PI + 360) % 360;
        Assert.InRange(Hue(ap, bp), 240, 300);
        Assert.InRange(Hue(an, bn), 40, 80);
        Assert.True(lz > 80 && Math.Sqrt(az * az + bz * bz) < 2, "zero is a light grey");
        Assert.True(lp < 40, "positive is dark enough to read on white");
        // Only one orange among the series: hue 30–70° with chroma above 40 (common practice: what reads as orange).
        int oranges = ChartPalette.Categorical.Select(c => Lab(Simulate(c, Deficiencies["normal"])))
            .Count(l => Hue(l.A, l.B) is >= 30 and <= 70 && Math.Sqrt(l.A * l.A + l.B * l.B) > 40);
        Assert.Equal(1, oranges);
        // Never a red/green pair: no series colour has a green hue (120–160°) with real chroma, nor a pure red one.
        Assert.DoesNotContain(ChartPalette.Categorical, c => Lab(Simulate(c, Deficiencies["normal"])) is var l
            && Math.Sqrt(l.A * l.A + l.B * l.B) > 25 && (Hue(l.A, l.B) is >= 120 and <= 160 || Hue(l.A, l.B) is < 30 or > 350));
    }

    [Fact]
    public void ChartsTakeTheirColoursOnlyFromChartPalette()
    {
        string folder = Path.Combine(ConventionTests.FindRepositoryRoot(), "src", "DriftWatch.Charts");
        var offenders = new List<string>();
        foreach (string file in Directory.EnumerateFiles(folder, "*.cs", SearchOption.AllDirectories))
        {
            if (Path.GetFileName(file) == "ChartPalette.cs")
                continue;
            foreach (var (line, number) in File.ReadLines(file).Select((l, i) => (l, i + 1)))
            {
                if (ColourMade().IsMatch(line))
                    offenders.Add($"{Path.GetRelativePath(folder, file)}:{number}: {line.Trim()}");
            }
        }
        Assert.True(offenders.Count == 0, "colours made outside ChartPalette:\n" + string.Join("\n", offenders));
    }

    // A colour made in code: from a hex string, a named colour of ScottPlot or SkiaSharp, or its channels.
    [GeneratedRegex(@"Color\.FromHex|Colors\.[A-Z]|SKColors\.|new Color\(|new SKColor\(|FromARGB|FromArgb|Color\.FromColor|Palettes\.|Colormaps\.")]
    private static partial Regex ColourMade();

    private static (double R, double G, double B) Simulate(ScottPlot.Color colour, double[,] m)
    {
        // sRGB to linear (IEC 61966-2-1), the matrix, clipped to the gamut.
        static double Linear(byte c) => c / 255.0 <= 0.04045 ? c / 255.0 / 12.92 : Math.Pow((c / 255.0 + 0.055) / 1.055, 2.4);
        double[] v = [Linear(colour.R), Linear(colour.G), Linear(colour.B)];
        double Row(int r) => Math.Clamp(m[r, 0] * v[0] + m[r, 1] * v[1] + m[r, 2] * v[2], 0, 1);
        return (Row(0), Row(1), Row(2));
    }

    private static (double L, double A, double B) Lab((double R, double G, double B) linear)
    {
        // Linear sRGB to XYZ (D65) and CIE 1976 L*a*b* (CIE 15:2004, common practice).
        var (r, g, b) = linear;
        double x = 0.4124564 * r + 0.3575761 * g + 0.1804375 * b;
        double y = 0.2126729 * r + 0.7151522 * g + 0.0721750 * b;
        double z = 0.0193339 * r + 0.1191920 * g + 0.9503041 * b;
        static double F(double t) => t > Math.Pow(6.0 / 29, 3) ? Math.Cbrt(t) : t / (3 * Math.Pow(6.0 / 29, 2)) + 4.0 / 29;
        double fx = F(x / 0.95047), fy = F(y), fz = F(z / 1.08883);
        return (116 * fy - 16, 500 * (fx - fy), 200 * (fy - fz));
    }

    private static double DeltaE((double L, double A, double B) p, (double L, double A, double B) q) =>
        Math.Sqrt((p.L - q.L) * (p.L - q.L) + (p.A - q.A) * (p.A - q.A) + (p.B - q.B) * (p.B - q.B));
}
