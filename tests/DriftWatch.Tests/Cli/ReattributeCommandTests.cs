using System.Security.Cryptography;
using DriftWatch.Cli;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Storage;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Cli;

[Collection(DemoStoreCollection.Name)]
public sealed class ReattributeCommandTests
{
    private readonly DemoStoreFixture _fixture;

    public ReattributeCommandTests(DemoStoreFixture fixture) => _fixture = fixture;

    private static (int Code, string Output, string Error) Run(params string[] args)
    {
        var output = new StringWriter();
        var error = new StringWriter();
        int code = CliApp.Run(args, output, error);
        return (code, output.ToString(), error.ToString());
    }

    private static string Hash(string path) => Convert.ToHexString(SHA256.HashData(File.ReadAllBytes(path)));

    [Fact]
    public void ReattributeStoresNewMapsThatShowListsWithTheirAgreementAndQuality()
    {
        using var temp = new TempFolder();
        string store = temp.File("copy.litedb");
        File.Copy(_fixture.StorePath, store);
        string assembly = typeof(GreenhouseNetFactory).Assembly.Location;

        var (code, output, error) = Run("reattribute", DemoStoreFixture.CleanRun, "--store", store, "--method", "smoothgrad",
            "--setting", "samples=4", "--epochs", "2..3", "--quality", "--model-assembly", assembly);
        var from = Run("reattribute", DemoStoreFixture.CleanRun, "--store", store, "--method", "smoothgrad", "--setting", "samples=4", "--epochs", "3..");
        var upTo = Run("reattribute", DemoStoreFixture.CleanRun, "--store", store, "--method", "saliency", "--epochs", "..1", "--model-assembly", assembly);

        Assert.True(code == ExitCodes.Fine, error);
        Assert.Contains("2 of 2 epochs re-attributed with smoothgrad (noise=0.15, samples=4, seed=0), stored as 're-smoothgrad'", output);
        Assert.Contains("--method re-smoothgrad", output);
        Assert.Equal("", error); // progress is for terminals only
        Assert.Contains("already stored under that name, left as they were: epochs 3", from.Output); // factory found without --model-assembly: already loaded
        Assert.Contains("1 of 1 epochs re-attributed with saliency", upTo.Output);
        Assert.DoesNotContain("already stored", upTo.Output);
        var again = Run("reattribute", DemoStoreFixture.CleanRun, "--store", store, "--method", "smoothgrad", "--setting", "samples=4", "--epochs", "2..");
        Assert.Matches(@"already stored under that name, left as they were: epochs 2\.\.\d+\r?$", again.Output.Split('\n').First(l => l.Contains("already stored", StringComparison.Ordinal)));

        var show = Run("show", DemoStoreFixture.CleanRun, "--store", store, "--method", "re-smoothgrad");
        Assert.Equal(ExitCodes.Fine, show.Code);
        Assert.Contains("Trust in the re-smoothgrad maps", show.Output);
        Assert.Matches(@"(?m)^epoch\s+ρ integrated-gradients\s+ρ re-saliency\s+infidelity\s+max-sensitivity$", show.Output);
        Assert.Matches(@"(?m)^\s+2\s+-?\d\.\d\d\s+-\s+\d+\.\d{3}\s+\d+\.\d{3}$", show.Output);
        Assert.Matches(@"(?m)^\s+4\s+-?\d\.\d\d\s+-\s+-\s+-$", show.Output); // re-attributed without quality figures
        var original = Run("show", DemoStoreFixture.CleanRun, "--store", store);
        Assert.Contains("Re-attributed maps of this run (show them with --method NAME): re-saliency, re-smoothgrad", original.Output);
        Assert.Matches(@"(?m)^\s+1\s+-?\d\.\d\d\s+-$", original.Output); // integrated-gradients against re-saliency (epoch 1 only) and re-smoothgrad
    }

    [Fact]
    public void ReattributeOfARunAnotherProcessStillWritesIsRefusedAndAStaleWriterIsTakenOver()
    {
        using var temp = new TempFolder();
        string store = temp.File("copy.litedb");
        File.Copy(_fixture.StorePath, store);
        Reliability.TwoWriterTests.Mark(store, "training-node", 4242, DateTime.UtcNow.AddMinutes(-3), DemoStoreFixture.CleanRun);
        string before = Hash(store);

        var refused = Run("reattribute", DemoStoreFixture.CleanRun, "--store", store, "--method", "saliency", "--epochs", "..1");
        Assert.Equal(ExitCodes.BadInput, refused.Code);
        Assert.Contains("is being written by process 4242 on host 'training-node' (monitor, writing since", Assert.Single(refused.Error.Trim().Split('\n')), StringComparison.Ordinal);
        Assert.Equal(before, Hash(store));

        Reliability.TwoWriterTests.Mark(store, "training-node", 4242, DateTime.UtcNow.AddHours(-2), DemoStoreFixture.CleanRun);
        var taken = Run("reattribute", DemoStoreFixture.CleanRun, "--store", store, "--method", "saliency", "--epochs", "..1");
        Assert.True(taken.Code == ExitCodes.Fine, taken.Error);
        using var reader = RunStore.OpenForReading(store);
        Assert.Null(reader.WriterOf(reader.GetRun(DemoStoreFixture.CleanRun).Id)); // let go when done
    }

    [Theory]
    [InlineData("--method", "lime")]
    [InlineData("--method", "integrated-gradients", "--as", "integrated-gradients")]
    [InlineData("--method", "smoothgrad", "--setting", "sigma=0.2")]
    [InlineData("--method", "saliency", "--epochs", "5..2")]
    [InlineData("--method", "saliency", "--epochs", "40..")]
    public void BadInputExitsTwoWithOneLineAndLeavesTheStoreAsItWas(params string[] options)
    {
        using var temp = new TempFolder();
        string store = temp.File("copy.litedb");
        File.Copy(_fixture.StorePath, store);
        string before = Hash(store);

        var (code, output, error) = Run(["reattribute", DemoStoreFixture.CleanRun, "--store", store, .. options]);

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Equal("", output);
        Assert.Single(error.Trim().Split('\n'));
        Assert.StartsWith("error: ", error);
        Assert.Equal(before, Hash(store));
    }

    [Fact]
    public void AMissingStoreIsNotCreated()
    {
        using var temp = new TempFolder();
        string store = temp.File("none.litedb");

        var (code, _, error) = Run("reattribute", "any", "--store", store, "--method", "saliency");

        Assert.Equal(ExitCodes.BadInput, code);
        Assert.Contains("does not exist", error);
        Assert.False(File.Exists(store));
    }

    [Fact]
    public void ARunWithoutAModelRecipeOrAWrongAssemblyIsRefusedWithWhatToDo()
    {
        using var temp = new TempFolder();
        string store = temp.File("copy.litedb");
        File.Copy(_fixture.StorePath, store);
        using (var writing = RunStore.OpenForWriting(store))
        {
            var run = writing.GetRun(DemoStoreFixture.LeakRun);
            run.ModelFactory = "";
            writing.UpdateRun(run);
        }
        string notAnAssembly = temp.File("weights.dll");
        File.WriteAllText(notAnAssembly, "not a .NET assembly");

        var noRecipe = Run("reattribute", DemoStoreFixture.LeakRun, "--store", store, "--method", "saliency");
        var wrongFile = Run("reattribute", DemoStoreFixture.CleanRun, "--store", store, "--method", "saliency", "--model-assembly", notAnAssembly);
        var wrongAssembly = Run("reattribute", DemoStoreFixture.CleanRun, "--store", store, "--method", "saliency", "--model-assembly", typeof(RunStore).Assembly.Location);

        Assert.Equal(ExitCodes.BadInput, noRecipe.Code);
        Assert.Contains("did not record how to rebuild its model; train a ready model family (DriftWatch.Hooks.Models.TabularNet) or set MonitorOptions.Model", noRecipe.Error);
        Assert.Equal(ExitCodes.BadInput, wrongFile.Code);
        Assert.Contains("is not a .NET assembly", wrongFile.Error);
        Assert.Equal(ExitCodes.BadInput, wrongAssembly.Code);
        Assert.Contains("has no type 'DriftWatch.Demo.Greenhouse.GreenhouseNetFactory'", wrongAssembly.Error);
    }
}
