using ScottPlot;
using SkiaSharp;

namespace DriftWatch.Charts;

/// <summary>The font every chart draws its text with: DejaVu Sans, bundled in this assembly (licence in <c>Fonts/LICENSE-DejaVu.txt</c>).</summary>
public static class ChartFonts
{
    /// <summary>The family name charts ask ScottPlot for.</summary>
    public const string FamilyName = "DejaVu Sans";

    private static readonly Lock Gate = new();
    private static bool _registered;

    /// <summary>Registers the bundled font with ScottPlot as its default font; safe to call many times and from many threads.</summary>
    public static void EnsureRegistered()
    {
        lock (Gate)
        {
            if (_registered)
                return;
            var resolver = new BundledFontResolver(Load("DejaVuSans.ttf"), Load("DejaVuSans-Bold.ttf"));
            // First in the list, so a differently built DejaVu on the machine never takes its place.
            Fonts.FontResolvers.Insert(0, resolver);
            Fonts.Default = FamilyName;
            Fonts.Sans = FamilyName;
            _registered = true;
        }
    }

    /// <summary>The licence text of the bundled font.</summary>
    public static string LicenceText()
    {
        using var stream = Resource("LICENSE-DejaVu.txt");
        using var reader = new StreamReader(stream);
        return reader.ReadToEnd();
    }

    private static SKTypeface Load(string file)
    {
        using var stream = Resource(file);
        using var data = SKData.Create(stream);
        return SKTypeface.FromData(data)
            ?? throw new InvalidOperationException($"bundled font '{file}' could not be read by SkiaSharp");
    }

    private static Stream Resource(string file) =>
        typeof(ChartFonts).Assembly.GetManifestResourceStream("DriftWatch.Charts.Fonts." + file)
            ?? throw new InvalidOperationException($"bundled resource '{file}' is missing from {typeof(ChartFonts).Assembly.GetName().Name}");

    // Answers only for our family name; any other name falls through to ScottPlot's own resolvers.
    private sealed class BundledFontResolver(SKTypeface regular, SKTypeface bold) : IFontResolver
    {
        public SKTypeface? CreateTypeface(string fontName, FontWeight weight, FontSlant slant, FontSpacing spacing) =>
            string.Equals(fontName, FamilyName, StringComparison.OrdinalIgnoreCase)
                ? (weight >= FontWeight.SemiBold ? bold : regular)
                : null;

        public SKTypeface? CreateTypeface(string fontName, bool bold, bool italic) =>
            CreateTypeface(fontName, bold ? FontWeight.Bold : FontWeight.Normal, italic ? FontSlant.Italic : FontSlant.Upright, FontSpacing.Normal);
    }
}
