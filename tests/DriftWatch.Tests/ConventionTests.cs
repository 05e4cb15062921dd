using System.Reflection;
using DriftWatch.Hooks;
using DriftWatch.Storage;
using Xunit;

namespace DriftWatch.Tests;

public sealed class ConventionTests
{
    private static readonly Assembly Core = typeof(RunStore).Assembly;
    private static readonly Assembly Hooks = typeof(TrainingMonitor).Assembly;

    [Fact]
    public void CoreAndHooksReferenceNeitherChartsNorCommandLine()
    {
        foreach (var assembly in new[] { Core, Hooks })
        {
            var names = assembly.GetReferencedAssemblies().Select(a => a.Name!).ToList();
            Assert.DoesNotContain(names, n => n.StartsWith("ScottPlot", StringComparison.Ordinal) || n.StartsWith("System.CommandLine", StringComparison.Ordinal));
        }
    }

    [Fact]
    public void CoreAndHooksNeverWriteToTheConsole()
    {
        string root = FindRepositoryRoot();
        var offenders = new[] { "src/DriftWatch.Core", "hooks/DriftWatch.Hooks" }
            .SelectMany(d => Directory.EnumerateFiles(Path.Combine(root, d), "*.cs", SearchOption.AllDirectories))
            .Where(f => !f.Contains("/obj/", StringComparison.Ordinal) && File.ReadAllText(f).Contains("Console.", StringComparison.Ordinal))
            .ToList();
        Assert.Empty(offenders);
    }

    [Fact]
    public void PublicClassesAreSealedAbstractOrStatic()
    {
        var open = new[] { Core, Hooks }
            .SelectMany(a => a.GetExportedTypes())
            .Where(t => t.IsClass && !t.IsSealed && !t.IsAbstract && t != typeof(DriftWatchException))
            .Select(t => t.FullName)
            .ToList();
        Assert.Empty(open);
    }

    internal static string FindRepositoryRoot()
    {
        var dir = new DirectoryInfo(AppContext.BaseDirectory);
        while (dir is not null && !File.Exists(Path.Combine(dir.FullName, "DriftWatch.sln")))
            dir = dir.Parent;
        return dir?.FullName ?? throw new InvalidOperationException("DriftWatch.sln not found above " + AppContext.BaseDirectory);
    }
}
