using DriftWatch.Probing;
using Xunit;

namespace DriftWatch.Tests.Probing;

public sealed class LabelKindTests
{
    // common practice: binary targets are written 0/1 (logistic loss) or −1/+1 (hinge loss); class targets as indices 0 … K−1 (cross-entropy).
    [Theory]
    [InlineData(new float[] { 0, 1, 1, 0 }, LabelKind.Binary)]
    [InlineData(new float[] { -1, 1, 1 }, LabelKind.Binary)]
    [InlineData(new float[] { 1, 1, 1 }, LabelKind.Binary)]
    [InlineData(new float[] { 0, 1, 2, 2 }, LabelKind.Classes)]
    [InlineData(new float[] { 0, 2, 5 }, LabelKind.Classes)]
    [InlineData(new float[] { 0.5f, 1, 0 }, LabelKind.Continuous)]
    [InlineData(new float[] { -1, 0, 1 }, LabelKind.Continuous)]
    [InlineData(new float[] { 0, 1, float.NaN }, LabelKind.Continuous)]
    public void Kinds(float[] labels, LabelKind expected) => Assert.Equal(expected, LabelKinds.Of(labels));

    [Fact]
    public void NoLabels() => Assert.Equal(LabelKind.None, LabelKinds.Of(null));
}
