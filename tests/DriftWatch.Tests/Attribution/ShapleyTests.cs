using DriftWatch.Attribution;
using DriftWatch.Model;
using DriftWatch.Tests.Support;
using TorchSharp;
using Xunit;
using static TorchSharp.torch;

namespace DriftWatch.Tests.Attribution;

public sealed class ShapleyTests
{
    // Players as feature groups: two dense features and one categorical-like group of two columns. The input switches
    // every column on (1) and the baseline off (0); whole groups switch together, so F at a coalition is the game's value.
    private static readonly FeatureSchema Players = FeatureSchema.CreateBuilder()
        .AddDense("player 1").AddDense("player 2").AddCategorical("player 3", 2).Build();

    private static ColumnAttribution Play(IAttributionMethod method, Func<Tensor, Tensor> game, int chunk = 4096)
    {
        using var scope = torch.NewDisposeScope();
        var input = new AttributionInput(game, torch.ones(1, 4), torch.zeros(4), chunk).WithSchema(Players);
        return method.Attribute(input);
    }

    private static double[] Values(ColumnAttribution result) =>
        [result.Scores[0], result.Scores[1], result.Scores[2] + result.Scores[3]];

    // Glove game: players 1 and 2 hold a right glove, player 3 a left one; a coalition is worth the pairs it can make.
    private static Tensor Gloves(Tensor z) => torch.minimum(z[.., 0] + z[.., 1], (z[.., 2] + z[.., 3]) / 2);

    // Unanimity game on {1, 3}: worth 1 exactly when players 1 and 3 are both in.
    private static Tensor UnanimityOneThree(Tensor z) => z[.., 0] * (z[.., 2] + z[.., 3]) / 2;

    [Fact]
    public void ExactShapleyOfTheGloveGameIsOneSixthOneSixthTwoThirds()
    {
        // Glove game with two right-glove holders and one left-glove holder: φ = (1/6, 1/6, 2/3)
        // (Maschler, Solan, Zamir, Game Theory, 2013 — from memory).
        var values = Values(Play(new ExactShapley(), Gloves));

        Assert.Equal(1.0 / 6, values[0], 6);
        Assert.Equal(1.0 / 6, values[1], 6);
        Assert.Equal(2.0 / 3, values[2], 6);
    }

    [Fact]
    public void ExactShapleyOfTheUnanimityGameOnOneAndThreeSplitsItsWorthBetweenThem()
    {
        // Unanimity game u_{1,3}: φ = (½, 0, ½) (Maschler, Solan, Zamir, Game Theory, 2013 — from memory).
        var values = Values(Play(new ExactShapley(), UnanimityOneThree));

        Assert.Equal(new[] { 0.5, 0.0, 0.5 }, values.Select(v => Math.Round(v, 6)));
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void SamplingConvergesToTheGloveGamesExactValues(bool antithetic)
    {
        // Castro, Gómez, Tejada 2009: the mean marginal contribution over sampled orderings is an unbiased estimate whose
        // error falls like 1/√m; against the textbook φ = (1/6, 1/6, 2/3) (Maschler, Solan, Zamir 2013 — from memory).
        double[] exact = [1.0 / 6, 1.0 / 6, 2.0 / 3];
        double Error(int permutations) =>
            Values(Play(new ShapleySampling(permutations, antithetic, seed: 11), Gloves)).Zip(exact).Max(p => Math.Abs(p.First - p.Second));

        double coarse = Error(4);
        double fine = Error(4000);

        Assert.True(fine < 0.02, $"4000 orderings left an error of {fine:0.0000}");
        Assert.True(coarse > fine, $"4 orderings ({coarse:0.0000}) were not worse than 4000 ({fine:0.0000})");
    }

    [Fact]
    public void SamplingGivesTheUnanimityGamesNullPlayerExactlyZero()
    {
        // Null-player axiom (Shapley 1953): a player whose marginal contribution is always 0 gets 0, in every ordering;
        // the two others converge to ½ each (Maschler, Solan, Zamir 2013 — from memory).
        var values = Values(Play(new ShapleySampling(2000, antithetic: true, seed: 5), UnanimityOneThree));

        Assert.Equal(0.0, values[1]);
        Assert.Equal(0.5, values[0], 1);
        Assert.Equal(0.5, values[2], 1);
        Assert.Equal(1.0, values[0] + values[2], 5);
    }

    [Fact]
    public void ScoresSumToTheOutputGapExactlyByEnumerationAndWithinRoundingBySampling()
    {
        // Efficiency (Shapley 1953): Σ_i φ_i = F(x) − F(x′); every sampled ordering telescopes to the same sum.
        using var model = new SmallNet(dense: 3, levels: 5, width: 4, hidden: 16);
        model.eval();
        var rows = new RowsBuilder().WithRows(10).Build();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.tensor(rows.Dense, [10, 3]), torch.tensor(rows.Categorical, [10, 1])).detach();
        var baseline = features.mean([0L]);
        var input = new AttributionInput(f => model.Score(f).squeeze(1), features, baseline, 7).WithSchema(model.Schema);

        var exact = AttributionMap.FromColumns(new ExactShapley().Attribute(input), model.Schema);
        var sampled = AttributionMap.FromColumns(new ShapleySampling(8).Attribute(input), model.Schema);

        Assert.All(exact.Deltas!, d => Assert.True(d < 1e-5, $"exact delta {d}"));
        Assert.All(sampled.Deltas!, d => Assert.True(d < 1e-4, $"sampled delta {d}"));
        Assert.True(exact.OutputGaps!.Any(g => Math.Abs(g) > 0.01), "the test model gives no output gap to split");
    }

    [Fact]
    public void SamplingApproachesEnumerationOnASmallNetwork()
    {
        // The Shapley value is the mean marginal contribution over all n! orderings (Shapley 1953); sampled orderings of
        // 3 players approach it (Castro, Gómez, Tejada 2009), here within 3% of the largest score.
        using var model = new SmallNet(dense: 2, levels: 5, width: 2, hidden: 8, seed: 3);
        model.eval();
        var rows = new RowsBuilder().WithDense(2).WithRows(6).Build();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.tensor(rows.Dense, [6, 2]), torch.tensor(rows.Categorical, [6, 1])).detach();
        var input = new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(4), 50).WithSchema(model.Schema);

        var exact = new ExactShapley().Attribute(input);
        var sampled = new ShapleySampling(6000, antithetic: true, seed: 2).Attribute(input);

        double scale = exact.Scores.Max(s => Math.Abs(s));
        for (int i = 0; i < exact.Scores.Length; i++)
            Assert.True(Math.Abs(exact.Scores[i] - sampled.Scores[i]) < 0.03 * scale, $"column score {i}: exact {exact.Scores[i]}, sampled {sampled.Scores[i]}");
    }

    [Fact]
    public void ChunkSizeDoesNotChangeSampledValues()
    {
        using var model = new SmallNet(dense: 3, levels: 5, width: 4);
        model.eval();
        var rows = new RowsBuilder().WithRows(9).Build();
        using var scope = torch.NewDisposeScope();
        var features = model.Encode(torch.tensor(rows.Dense, [9, 3]), torch.tensor(rows.Categorical, [9, 1])).detach();
        var method = new ShapleySampling(6, antithetic: false, seed: 9);

        var whole = method.Attribute(new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(7), 1 << 20).WithSchema(model.Schema));
        var chunked = method.Attribute(new AttributionInput(f => model.Score(f).squeeze(1), features, torch.zeros(7), 5).WithSchema(model.Schema));

        for (int i = 0; i < whole.Scores.Length; i++)
            Assert.Equal(whole.Scores[i], chunked.Scores[i], 1e-6); // batched matrix products may round differently per batch size
        Assert.Equal(2L * 9 + 6L * 3 * 9, whole.Evaluations); // endpoints once, then (features − 1) points per ordering per row
    }

    [Fact]
    public void ExactShapleyRefusesMoreThanTwelveFeatures()
    {
        using var scope = torch.NewDisposeScope();
        var input = new AttributionInput(f => f.sum(dim: 1), torch.ones(1, 13), torch.zeros(13), 64);

        var error = Assert.Throws<DriftWatchException>(() => new ExactShapley().Attribute(input));
        Assert.Contains("at most 12 features; got 13", error.Message);
    }

    [Fact]
    public void AntitheticSamplingOfTwoPlayersIsExactWithOneOrderingAndItsReverse()
    {
        // Two players: v({1}) = 1, v({2}) = 0, v({1, 2}) = 3. The Shapley value is the mean marginal contribution over
        // the 2! orderings (Shapley 1953): φ1 = ((1 − 0) + (3 − 0)) / 2 = 2, φ2 = ((0 − 0) + (3 − 1)) / 2 = 1 (worked by
        // hand from the definition). An ordering and its reverse are both orderings, so antithetic sampling with 2 is exact
        // for every seed; two independent draws repeat one ordering for some seeds.
        var two = FeatureSchema.CreateBuilder().AddDense("player 1").AddDense("player 2").Build();
        static Tensor Game(Tensor z) => z[.., 0] + 2 * z[.., 0] * z[.., 1];
        double[] Shapley(ShapleySampling method)
        {
            using var scope = torch.NewDisposeScope();
            var result = method.Attribute(new AttributionInput(Game, torch.ones(1, 2), torch.zeros(2), 64).WithSchema(two));
            return [result.Scores[0], result.Scores[1]];
        }

        for (int seed = 0; seed < 10; seed++)
            Assert.Equal(new[] { 2.0, 1.0 }, Shapley(new ShapleySampling(2, antithetic: true, seed: seed)).Select(v => Math.Round(v, 5)));
        var plain = Enumerable.Range(0, 10).Select(seed => Shapley(new ShapleySampling(2, antithetic: false, seed: seed))).ToList();
        Assert.Contains(plain, v => Math.Abs(v[0] - 2) > 0.5); // both draws were the same ordering: φ = (1, 2) or (3, 0)
        Assert.All(plain, v => Assert.Equal(3.0, v[0] + v[1], 5)); // efficiency holds for every ordering, sampled or not
    }

    [Fact]
    public void AntitheticSamplingNeedsAnEvenNumberOfOrderings()
    {
        var error = Assert.Throws<DriftWatchException>(() => new ShapleySampling(25, antithetic: true));
        Assert.Contains("must be even", error.Message);
        Assert.Equal(25, new ShapleySampling(25, antithetic: false).Permutations);
    }
}
