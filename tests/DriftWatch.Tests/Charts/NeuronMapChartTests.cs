using DriftWatch.Charts;
using DriftWatch.Layers;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using SkiaSharp;
using Xunit;

namespace DriftWatch.Tests.Charts;

public sealed class NeuronMapChartTests
{
    private static LayerMapDocument Map(int epoch, int units, Func<int, float> unitScore) => new()
    {
        RunId = 1,
        Epoch = epoch,
        Layer = "<script>|a",
        Method = "layer-conductance",
        Target = "regression",
        Rows = 2,
        Units = units,
        Scores = FloatBytes.FromFloats([.. Enumerable.Range(0, units).Select(unitScore), .. Enumerable.Range(0, units).Select(unitScore)]),
        Outputs = FloatBytes.FromFloats([0f, 0f]),
    };

    [Theory]
    [InlineData(NeuronMapValue.Class)]
    [InlineData(NeuronMapValue.Conductance)]
    public void OneEpochOfOneUnitStillDrawsAFullCell(NeuronMapValue value)
    {
        using var temp = new TempFolder();
        var audit = NeuronAudit.Run([Map(4, 1, _ => -1f)], "regression", new NeuronAuditOptions());
        string path = temp.File("one.png");

        new NeuronMapChart(value).Render(audit, "a <run>", path, ChartSize.Default);

        PngAssert.IsChart(path, 1200, 700);
        // The single cell is orange to brown (consistently negative, or the bottom of the diverging scale) across the data area.
        using var bitmap = SKBitmap.Decode(path);
        int orange = 0;
        for (int x = 200; x < 700; x += 10)
        {
            var c = bitmap.GetPixel(x, 400);
            if (c.Red > c.Blue + 60 && c.Red > c.Green)
                orange++;
        }
        Assert.True(orange > 40, $"{orange} of 50 sampled pixels are orange");
    }

    [Fact]
    public void CellsLineUpWithTheirEpochs()
    {
        // Three epochs, one unit, negative only at the middle epoch (blue, orange, blue): the orange band must sit in the middle third of the
        // data area, not stretched or shifted by half a cell.
        using var temp = new TempFolder();
        var audit = NeuronAudit.Run([Map(1, 1, _ => 1f), Map(2, 1, _ => -1f), Map(3, 1, _ => 1f)], "regression", new NeuronAuditOptions());
        string path = temp.File("three.png");

        new NeuronMapChart().Render(audit, "run", path, ChartSize.Default);

        using var bitmap = SKBitmap.Decode(path);
        // Along a line through the rows, find the blue or orange data area and the orange run inside it.
        int y = 400;
        var coloured = Enumerable.Range(0, bitmap.Width).Where(x => Saturated(bitmap.GetPixel(x, y))).ToList();
        var orange = coloured.Where(x => bitmap.GetPixel(x, y).Red > 200 && bitmap.GetPixel(x, y).Blue < 120).ToList();
        Assert.NotEmpty(orange);
        double left = coloured.Min(), width = coloured.Max() - left + 1;
        Assert.InRange((orange.Min() - left) / width, 0.30, 0.36);
        Assert.InRange((orange.Max() + 1 - left) / width, 0.64, 0.70);
    }

    private static bool Saturated(SKColor c) => Math.Max(c.Red, Math.Max(c.Green, c.Blue)) - Math.Min(c.Red, Math.Min(c.Green, c.Blue)) > 80;
}
