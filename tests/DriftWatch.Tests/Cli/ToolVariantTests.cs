using DriftWatch.Cli;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Cli;

public sealed class ToolVariantTests
{
    [Fact]
    public void VersionSaysThisIsTheFullToolAndItsPackage()
    {
        var output = new StringWriter();

        Assert.Equal(ExitCodes.Fine, CliApp.Run(["--version"], output, new StringWriter()));

        string line = Assert.Single(output.ToString().Split('\n', StringSplitOptions.RemoveEmptyEntries));
        Assert.StartsWith("driftwatch 0.1.0 full (package DriftWatch.Cli)", line, StringComparison.Ordinal);
        Assert.False(ToolVariant.IsLean);
    }

    [Fact]
    public void TheLeanToolNamesWhatIsMissingBeforeAModelCommandAndNothingElse()
    {
        using var temp = new TempFolder();
        File.WriteAllText(temp.File("libc10.so"), "");

        var unset = Assert.Throws<DriftWatchException>(() => ToolVariant.Needs("reattribute", lean: true, folder: null));
        Assert.StartsWith("'reattribute' runs a model and needs libtorch, which this lean driftwatch leaves out; install the full tool (package DriftWatch.Cli), or set DRIFTWATCH_LIBTORCH", unset.Message, StringComparison.Ordinal);
        var partial = Assert.Throws<DriftWatchException>(() => ToolVariant.Needs("follow", lean: true, folder: temp.Path));
        Assert.StartsWith($"DRIFTWATCH_LIBTORCH='{temp.Path}' has no libtorch_cpu.so, libtorch.so, libLibTorchSharp.so;", partial.Message, StringComparison.Ordinal);

        // The store-reading commands never need it, and the full tool has it beside the program.
        Assert.False(ToolVariant.Needs("show", lean: true, folder: null));
        Assert.False(ToolVariant.Needs("prune", lean: false, folder: null));
        // A folder holding every library is used (this test host's own output folder has them, patched by the build).
        Assert.True(ToolVariant.Needs("prune", lean: true, folder: AppContext.BaseDirectory));
    }
}
