using System.Reflection;
using DriftWatch.Detection;
using DriftWatch.Detection.Rules;
using DriftWatch.Storage;
using DriftWatch.Tests.Reliability;
using DriftWatch.Tests.Support;
using LiteDB;
using Xunit;

namespace DriftWatch.Tests.Detection;

// The rule catalogue as a convention (common practice): every kind is one registered rule class carrying all that is said
// about it, so a new kind cannot build while other places silently fall back to defaults.
public sealed class FindingRuleTests
{
    private static readonly Assembly Core = typeof(FindingRules).Assembly;

    [Fact]
    public void EveryRuleClassIsRegisteredOnceAndEveryRegisteredKindHasAllItsMetadata()
    {
        var ruleClasses = Core.GetTypes().Where(t => typeof(IFindingRule).IsAssignableFrom(t) && t.IsClass && !t.IsAbstract).ToList();
        var rules = FindingRules.Create(GatePolicy.Default);

        Assert.Equal(ruleClasses.Count, rules.Length);
        Assert.Equal(ruleClasses.OrderBy(t => t.Name), rules.Select(r => r.GetType()).OrderBy(t => t.Name));
        Assert.Equal(FindingRules.Kinds.Select(k => k.Kind), rules.Select(r => r.Info.Kind));
        Assert.Equal(FindingRules.Kinds.Length, FindingRules.Kinds.Select(k => k.Kind).Distinct().Count());
        foreach (var info in FindingRules.Kinds)
        {
            Assert.True(info.IsKnown);
            Assert.False(string.IsNullOrWhiteSpace(info.PlainWords), $"{info.Kind} has no plain words");
            Assert.False(string.IsNullOrWhiteSpace(info.Description), $"{info.Kind} has no description");
            Assert.True(Enum.IsDefined(info.Severity) && Enum.IsDefined(info.Role), $"{info.Kind} has no severity rule or evaluation role");
            string advice = info.Advice(new AdviceContext("'some feature'", 7));
            Assert.False(string.IsNullOrWhiteSpace(advice), $"{info.Kind} has no advice");
            // A kind that names a feature says which in its advice; a family is only for kinds about one feature.
            if (info.Role is EvaluationRole.NamesFault or EvaluationRole.Advisory)
                Assert.Contains("'some feature'", advice, StringComparison.Ordinal);
            if (info.Family is not null)
                Assert.NotEqual(EvaluationRole.LossRule, info.Role);
        }
    }

    [Fact]
    public void EveryNamedKindOnFindingKindIsARegisteredKind()
    {
        var named = typeof(FindingKind).GetProperties(BindingFlags.Public | BindingFlags.Static)
            .Where(p => p.PropertyType == typeof(FindingKind))
            .Select(p => (FindingKind)p.GetValue(null)!)
            .ToList();

        Assert.NotEmpty(named);
        Assert.All(named, kind => Assert.True(kind.IsKnown, $"{kind} has no registered rule"));
        Assert.Equal(FindingRules.Kinds.Select(k => k.Kind.Name).Order(StringComparer.Ordinal), named.Select(k => k.Name).Order(StringComparer.Ordinal));
        Assert.Equal(FindingRules.Kinds.Select(k => k.Kind.Name), FindingKinds.Names);
    }

    [Fact]
    public void KindsOrderAsTheCatalogueListsThemAndUnknownKindsComeAfter()
    {
        var unknown = new FindingKind("SomethingNewer");
        var kinds = new[] { unknown, FindingKind.MonitoringFailure, FindingKind.Leak, FindingKind.Overfitting, FindingKind.MemorisedIdentifier };

        Assert.Equal([FindingKind.Leak, FindingKind.MemorisedIdentifier, FindingKind.Overfitting, FindingKind.MonitoringFailure, unknown], kinds.Order());
        Assert.False(unknown.IsKnown);
        Assert.Equal("a kind this version does not know (SomethingNewer)", unknown.Info.PlainWords);
        Assert.Throws<ArgumentException>(() => new FindingKind("not a name"));
    }

    [Fact]
    public void AnEpochSpanRunsForwardsAndReadsOneOrTwoStoredEpochs()
    {
        Assert.Equal(new EpochSpan(3, 3), EpochSpan.FromStored([3]));
        Assert.Equal(new EpochSpan(2, 5), EpochSpan.FromStored([2, 5]));
        Assert.Equal("2–5", new EpochSpan(2, 5).ToString());
        Assert.Equal("4", EpochSpan.At(4).ToString());
        Assert.True(new EpochSpan(2, 5).Contains(5));
        Assert.False(new EpochSpan(2, 5).Contains(6));
        Assert.Throws<ArgumentOutOfRangeException>(() => new EpochSpan(5, 2));
        Assert.Throws<ArgumentException>(() => EpochSpan.FromStored([]));
    }

    [Fact]
    public void AStoreWithAKindThisVersionDoesNotKnowOpensAndShowsItAsSuch()
    {
        using var folder = new TempFolder();
        string store = folder.File("newer.litedb");
        new StoreBuilder().WithRun("newer").WithLeakFinding(feature: 1, fromEpoch: 3).Build(store);
        // What a newer version would write: a finding of a kind this one has no rule for.
        using (var database = new LiteDatabase(new ConnectionString { Filename = store, Connection = ConnectionType.Direct }))
        {
            var verdicts = database.GetCollection("verdicts");
            var last = verdicts.FindAll().OrderBy(v => v["Epoch"].AsInt32).Last();
            last["Findings"].AsArray[0]["Kind"] = "SaltedHash";
            Assert.True(verdicts.Update(last));
        }

        var (code, output, error) = SampleStore.Cli("check", "newer", "--store", store, "--any");
        var (jsonCode, json, _) = SampleStore.Cli("check", "newer", "--store", store, "--json", "--any");
        var (showCode, _, showError) = SampleStore.Cli("show", "newer", "--store", store);

        Assert.NotEqual(2, code);
        Assert.Equal(string.Empty, error);
        Assert.Contains("a kind this version does not know (SaltedHash)", output, StringComparison.Ordinal);
        Assert.Equal(code, jsonCode);
        Assert.Contains("\"SaltedHash\"", json, StringComparison.Ordinal);
        Assert.Equal(0, showCode);
        Assert.Equal(string.Empty, showError);
        using var reader = RunStore.OpenForReading(store);
        var verdict = VerdictDocuments.FromDocument(reader.Verdicts(reader.Runs().Single().Id).Last());
        Assert.Contains(verdict.Findings, f => f.Kind.Name == "SaltedHash" && !f.Kind.IsKnown);
    }

    [Fact]
    public void AKindNameNoVersionCouldWriteStillMarksTheVerdictDamaged()
    {
        using var folder = new TempFolder();
        string store = folder.File("damaged.litedb");
        new StoreBuilder().WithRun("damaged").WithLeakFinding(feature: 1, fromEpoch: 3).Build(store);
        using (var database = new LiteDatabase(new ConnectionString { Filename = store, Connection = ConnectionType.Direct }))
        {
            var verdicts = database.GetCollection("verdicts");
            var last = verdicts.FindAll().OrderBy(v => v["Epoch"].AsInt32).Last();
            last["Findings"].AsArray[0]["Kind"] = "7; drop";
            Assert.True(verdicts.Update(last));
        }

        var (code, _, error) = SampleStore.Cli("check", "damaged", "--store", store);

        Assert.Equal(2, code);
        Assert.Contains("damaged", error, StringComparison.Ordinal);
    }
}
