using DriftWatch.Demo;
using DriftWatch.Demo.Greenhouse;
using DriftWatch.Tests.Support;

namespace DriftWatch.Tests.Demo;

/// <summary>One store with two demo runs, trained once for every test that reads it: a leak run and a clean run.</summary>
public sealed class DemoStoreFixture : IDisposable
{
    private readonly TempFolder _folder = new();

    public DemoStoreFixture()
    {
        StorePath = _folder.File("greenhouse.litedb");
        LeakOutput = Train(GreenhouseVariant.LeakOnly, LeakRun, epochs: 8);
        CleanOutput = Train(GreenhouseVariant.Clean, CleanRun, epochs: 18);
    }

    public const string LeakRun = "leak-test";

    public const string CleanRun = "clean-test";

    public string StorePath { get; }

    public string Folder => _folder.Path;

    public string LeakOutput { get; }

    public string CleanOutput { get; }

    public void Dispose() => _folder.Dispose();

    private string Train(GreenhouseVariant variant, string run, int epochs)
    {
        var output = new StringWriter();
        var options = new DemoOptions
        {
            StorePath = StorePath,
            Variant = variant,
            Epochs = epochs,
            Seed = 3,
            Steps = DemoOptions.DefaultSteps,
            ProbePerHalf = 128,
            RunName = run,
        };
        int code = GreenhouseTraining.Run(options, output);
        if (code != 0)
            throw new InvalidOperationException($"demo exited {code}: {output}");
        return output.ToString();
    }
}
