using System.Text.Json;
using DriftWatch.Cli;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Cli;

/// <summary>What <c>check</c> and <c>show</c> say about a run with two methods whose second one alone sees a leak.</summary>
public sealed class SeveralMethodsOutputTests
{
    private static (int Code, string Output, string Error) Run(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    [Fact]
    public void CheckReportsAFindingSeenByOneMethodOnlyAsACautionAndAPolicyKeyMakesItHalt()
    {
        using var temp = new TempFolder();
        string store = temp.File("two.litedb");
        new TwoMethodRun().Build(store);
        string policy = temp.File("policy.json");
        File.WriteAllText(policy, """{ "singleMethodMayHalt": true }""");

        var stored = Run("check", "two-methods", "--store", store);
        var json = Run("check", "two-methods", "--store", store, "--json");
        var halting = Run("check", "two-methods", "--store", store, "--policy", policy);

        Assert.Equal(ExitCodes.Fine, stored.Code);
        Assert.Contains("two-methods: epoch 4  Caution  (stored verdicts)", stored.Output);
        Assert.Matches(@"caution  Leak \(epochs [0-9–]+\): Seen by smoothgrad only: integrated-gradients, whose maps the verdict reads, does not show it at this epoch: 'humidity' takes ", stored.Output);
        using (var document = JsonDocument.Parse(json.Output))
        {
            var finding = document.RootElement.GetProperty("findings")[0];
            Assert.Equal("smoothgrad", finding.GetProperty("seen_only_by")[0].GetString());
            Assert.Equal("Caution", finding.GetProperty("severity").GetString());
            double rho = finding.GetProperty("agreement").GetDouble();
            Assert.InRange(rho, -1, 1);
        }
        // Judged again under a policy that lets such findings halt: the replay makes the same finding, now a Halt.
        Assert.Equal(ExitCodes.Halt, halting.Code);
        Assert.Contains("epoch 4  Halt  — stopping is advised", halting.Output);
        Assert.Matches(@"halt     Leak \(epochs [0-9–]+\): Seen by smoothgrad only", halting.Output);
    }

    [Fact]
    public void ShowListsTheFindingAndEveryMethodsQualityFigures()
    {
        using var temp = new TempFolder();
        string store = temp.File("two.litedb");
        new TwoMethodRun().Build(store);

        var (code, output, error) = Run("show", "two-methods", "--store", store);
        var json = Run("show", "two-methods", "--store", store, "--json");

        Assert.True(code == ExitCodes.Fine, error);
        Assert.Matches(@"(?m)^  epochs 2–4\s+Caution\s+leak, seen by smoothgrad only 'humidity': Seen by smoothgrad only: integrated-gradients, whose maps the verdict reads", output);
        Assert.Matches(@"(?m)^epoch\s+ρ smoothgrad\s+infidelity\s+max-sensitivity$", output);
        Assert.Matches(@"(?m)^\s+4\s+-?\d\.\d\d\s+0\.050\s+0\.200$", output); // integrated-gradients at epoch 4: 0.01 × 5
        Assert.Contains("Quality figures of every method", output);
        // Medians over epochs 0–4: 0.01 × (1..5) → 0.030, last 0.050; 0.5 + 0.1 × (0..4) → 0.700, last 0.900.
        Assert.Matches(@"(?m)^integrated-gradients\s+5\s+0\.030 \(0\.050\)\s+0\.200 \(0\.200\)$", output);
        Assert.Matches(@"(?m)^smoothgrad\s+5\s+0\.700 \(0\.900\)\s+0\.400 \(0\.400\)$", output);

        using var document = JsonDocument.Parse(json.Output);
        var trust = document.RootElement.GetProperty("trust").EnumerateArray().ToList();
        Assert.Equal(10, trust.Count);
        var last = trust.Single(t => t.GetProperty("epoch").GetInt32() == 4 && t.GetProperty("method").GetString() == "smoothgrad");
        Assert.Equal(0.9, last.GetProperty("relative_infidelity").GetDouble(), 12);
        Assert.Equal(0.4, last.GetProperty("relative_max_sensitivity").GetDouble(), 12);
        var finding = document.RootElement.GetProperty("findings").EnumerateArray().Single();
        Assert.Equal("smoothgrad", finding.GetProperty("seen_only_by")[0].GetString());
        Assert.Equal(last.GetProperty("agreement").GetDouble(), finding.GetProperty("agreement").GetDouble(), 12);
    }
}
