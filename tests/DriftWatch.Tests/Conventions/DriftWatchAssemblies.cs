using System.Reflection;

namespace DriftWatch.Tests.Conventions;

/// <summary>Every assembly DriftWatch ships, for convention tests that reflect over them all.</summary>
internal static class DriftWatchAssemblies
{
    public static IReadOnlyList<Assembly> All { get; } =
    [
        typeof(DriftWatch.Storage.RunStore).Assembly,
        typeof(DriftWatch.Hooks.TrainingMonitor).Assembly,
        typeof(DriftWatch.Charts.RunHistory).Assembly,
        typeof(DriftWatch.Export.RunTables).Assembly,
        typeof(DriftWatch.Cli.ExitCodes).Assembly,
        typeof(DriftWatch.Demo.Greenhouse.GreenhouseScenario).Assembly,
    ];
}
