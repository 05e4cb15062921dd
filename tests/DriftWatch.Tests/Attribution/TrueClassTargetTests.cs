using DriftWatch.Attribution;
using DriftWatch.Hooks;
using DriftWatch.Model;
using DriftWatch.Probing;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Attribution;

// The row's-true-class target: each row attributed towards its own class's output.
public sealed class TrueClassTargetTests
{
    // A linear three-class model F_k(x) = W_k · x over four dense features.
    private static readonly float[,] Weights = { { 1.0f, -0.5f, 0.0f, 2.0f }, { -1.0f, 1.5f, 0.5f, 0.0f }, { 0.25f, 0.0f, -2.0f, 1.0f } };

    private static FunctionModel Linear()
    {
        var w = torch.tensor(new[] { 1.0f, -0.5f, 0.0f, 2.0f, -1.0f, 1.5f, 0.5f, 0.0f, 0.25f, 0.0f, -2.0f, 1.0f }, [3, 4]);
        return new FunctionModel(4, x => x.matmul(w.t()));
    }

    private static ProbeSet Probe(Func<int, float> label, int perHalf = 9)
    {
        ProbeRows Rows(int offset) => new(
            [.. Enumerable.Range(0, perHalf * 4).Select(i => (float)Math.Sin(0.7 * (offset * 4 + i) + 0.3))], 4, [], 0,
            [.. Enumerable.Range(offset, perHalf).Select(label)]);
        return new ProbeSet(Rows(0), Rows(perHalf));
    }

    [Fact]
    public void EachRowIsAttributedTowardsItsOwnClass()
    {
        // Sundararajan, Taly & Yan 2017: Integrated Gradients of a linear function from a zero baseline is w_j x_j
        // exactly (linearity and completeness); towards the row's own class c that is W[c, j] x_j, and the output gap is F_c(x).
        using var model = Linear();
        var probe = Probe(r => r % 3);
        var attribution = new EpochAttribution
        {
            Probe = probe,
            Schema = model.Schema,
            Methods = [new IntegratedGradients(8)],
            Target = AttributionTarget.TrueClass,
            Quality = new QualityOptions { SampleRows = 6, InfidelityPerturbations = 4, SensitivityPerturbations = 2 },
        };

        var result = attribution.Attribute(model, runId: 1, epoch: 1);

        Assert.Empty(result.Problems);
        var map = Assert.Single(result.Maps);
        Assert.Equal("true class", map.Document.Target);
        var labels = probe.Rows.Labels!;
        for (int r = 0; r < probe.Count; r++)
        {
            int c = (int)labels[r];
            double output = 0;
            for (int j = 0; j < 4; j++)
            {
                float x = probe.Rows.Dense[r * 4 + j];
                Assert.Equal(Weights[c, j] * x, map.Map[r, j], 4);
                output += Weights[c, j] * x;
            }
            Assert.Equal(output, map.Map.OutputGaps![r], 4);
        }
        // Gradient methods predict a linear model's removals exactly (Yeh et al. 2019): infidelity 0, class by class.
        Assert.NotNull(map.Figures);
        Assert.Equal(0, map.Figures!.Infidelity, 6);
        Assert.Equal(6 * 3, map.Figures.Rows); // each class's rows measured with its own output
        // Alignment with the row's own class is mean(score) / mean |score|.
        var heldOut = Enumerable.Range(0, probe.HeldOutCount).ToArray();
        double signed = heldOut.Average(r => (double)map.Map[r, 3]);
        double absolute = heldOut.Average(r => Math.Abs((double)map.Map[r, 3]));
        Assert.Equal(signed / absolute, map.Document.HeldOut.Alignment![3], 6);
    }

    [Fact]
    public void AModelWithFewerOutputsThanClassesIsRefusedWithOneLine()
    {
        using var model = new FunctionModel(4, x => x.sum(1, keepdim: true));
        var attribution = new EpochAttribution { Probe = Probe(r => r % 3), Schema = model.Schema, Methods = [new Saliency()], Target = AttributionTarget.TrueClass };

        var e = Assert.Throws<DriftWatchException>(() => attribution.Attribute(model, 1, 1));

        Assert.Contains("the true-class target needs one output per class", e.Message, StringComparison.Ordinal);
        Assert.DoesNotContain('\n', e.Message);
    }

    [Fact]
    public void TheMonitorAttributesClassLabelsTowardsEachRowsOwnClassByDefault()
    {
        using var temp = new TempFolder();
        using var model = Linear();
        MonitorOptions Options(ProbeSet probe) => new() { StorePath = temp.File("s.litedb"), RunName = "classes", Schema = model.Schema, Probe = probe };

        Assert.Equal(AttributionTarget.TrueClass, Options(Probe(r => r % 3)).Target);
        Assert.Equal(AttributionTarget.Logit, Options(Probe(r => r % 2)).Target);
        Assert.Equal(AttributionTarget.Logit, (Options(Probe(r => r % 3)) with { Target = AttributionTarget.Logit }).Target);
        Assert.Equal(AttributionTarget.Class(2), (Options(Probe(r => r % 3)) with { Target = AttributionTarget.Class(2) }).Target);
        var continuous = Options(Probe(r => r * 0.37f)) with { Target = AttributionTarget.TrueClass };
        var e = Assert.Throws<DriftWatchException>(continuous.Validate);
        Assert.Contains("Target is the row's true class but the probe's labels are not class indices", e.Message, StringComparison.Ordinal);
        Assert.Equal(AttributionTarget.TrueClass, AttributionTarget.Parse(AttributionTarget.TrueClass.Label));
    }
}
