using System.Diagnostics;
using System.Text.RegularExpressions;
using System.Xml.Linq;
using DriftWatch.Build;
using DriftWatch.Detection;
using DriftWatch.Storage;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Build;

/// <summary>
/// A project of one's own, as the README's embedding section tells a user to make it: outside the repository, the
/// libraries packed into a folder, a new console project, <c>dotnet add package DriftWatch.Hooks --source</c>, the README's
/// <c>Program.cs</c> copied verbatim, built and run. Nothing else is added to the project, so a step the packages fail to
/// carry (the Debian 12 loader fix, the choice of libtorch natives, a using the example lacks) fails here.
/// </summary>
/// <remarks>
/// The outside judges are the .NET SDK and NuGet themselves (template, restore, build) and glibc's dynamic loader, which
/// refuses TorchSharp's library on Debian 12 unless the GLIBCXX_3.4.32 need is weak (glibc elf/dl-version.c). One test:
/// packing, restoring and building a project take a while, most of it spent once.
/// </remarks>
public sealed partial class FreshProjectTests
{
    private const string RunName = "grade-net-night-1";

    // What `dotnet new console` (SDK 10) writes into a project file; the test adds nothing but the package reference.
    private static readonly string[] TemplateProperties = ["OutputType", "TargetFramework", "ImplicitUsings", "Nullable"];

    [Fact]
    public void TheReadmeProgramTrainsInAFreshProjectThatOnlyReferencesThePackage()
    {
        string root = ConventionTests.FindRepositoryRoot();
        string program = ReadmeProgram(File.ReadAllText(Path.Combine(root, "README.md")));
        using var temp = new TempFolder();
        Assert.False(IsUnder(temp.Path, root), $"the fresh project must live outside the repository ({temp.Path})");
        AssertNoBuildOrNuGetFilesAbove(temp.Path);

        // A version of its own, so the NuGet cache never serves an earlier build of 0.1.0 to this test or 0.1.0 to a user.
        string version = "0.1.0-fresh." + Guid.NewGuid().ToString("N")[..10];
        string feed = temp.File("feed");
        string app = temp.File("FreshTraining");
        try
        {
            // The libraries were built by this test run's own build; pack them as they are (same configuration).
            Run(root, "pack", "DriftWatch.Libraries.slnf", "-c", Configuration, "--no-build", "-o", feed, "-p:Version=" + version);
            Assert.Contains($"DriftWatch.Hooks.{version}.nupkg", Directory.GetFiles(feed).Select(Path.GetFileName));

            Run(temp.Path, "new", "console", "-n", "FreshTraining", "-o", app);
            Run(app, "add", "package", "DriftWatch.Hooks", "--version", version, "--source", feed);
            File.WriteAllText(Path.Combine(app, "Program.cs"), program);
            AssertTheProjectIsTheTemplatePlusOneReference(Path.Combine(app, "FreshTraining.csproj"));

            string output = Run(app, "run");

            var printed = EpochLine().Matches(output).Select(m => (Epoch: int.Parse(m.Groups[1].Value, System.Globalization.CultureInfo.InvariantCulture), Kind: m.Groups[2].Value)).ToList();
            Assert.True(printed.Count >= 2, "the README's program printed fewer than two epochs:\n" + output);
            Assert.Equal(Enumerable.Range(1, printed.Count), printed.Select(p => p.Epoch));
            Assert.True(printed.Count == 30 || printed[^1].Kind == nameof(VerdictKind.Halt), "the loop ends at epoch 30 or on a Halt:\n" + output);

            using var store = RunStore.OpenForReading(Path.Combine(app, "runs.litedb"));
            var epochs = store.StoredEpochs(RunName);
            Assert.Equal(printed.Select(p => p.Epoch), epochs.Select(e => e.Epoch));
            Assert.All(epochs, e => Assert.Empty(e.Problems)); // attribution ran in the package consumer without a monitoring failure
            var run = Assert.Single(store.StoredRuns());
            Assert.Equal(["air temperature", "humidity", "greenhouse bay"], run.Features.ToArray());
            Assert.Equal(printed.Select(p => p.Kind), store.StoredVerdicts(run.Id).Select(v => v.Kind.ToString()));

            // The build step reached the consumer: one platform's libtorch, and the copied library's marker need weak.
            string outputFolder = Path.Combine(app, "bin", "Debug", "net10.0");
            string copied = Path.Combine(outputFolder, "runtimes", "linux-x64", "native", "libLibTorchSharp.so");
            Assert.True(ElfWeakVersion.ReadNeeds(File.ReadAllBytes(copied)).Single(n => n.Version == "GLIBCXX_3.4.32").IsWeak);
            var torchNatives = Directory.GetFiles(Path.Combine(outputFolder, "runtimes"), "*torch*", SearchOption.AllDirectories);
            Assert.NotEmpty(torchNatives);
            Assert.DoesNotContain(torchNatives, f => !f.Contains($"runtimes{Path.DirectorySeparatorChar}linux-x64{Path.DirectorySeparatorChar}", StringComparison.Ordinal));

            // A build for a platform without libtorch stops with one line naming the supported ones.
            var (exit, text) = TryRun(app, "build", "-r", "linux-arm64", "-p:UseAppHost=false");
            Assert.NotEqual(0, exit);
            string line = Assert.Single(text.Split('\n').Where(l => l.Contains("error DW0001", StringComparison.Ordinal)).Select(l => l.Trim()).Distinct());
            Assert.Contains("linux-x64 (tested on Debian 12), win-x64 and osx-arm64", line, StringComparison.Ordinal);
            Assert.Contains("this build is for linux-arm64", line, StringComparison.Ordinal);
        }
        finally
        {
            ForgetCachedPackages(version);
        }
    }

    [Fact]
    public void TheReadmeProgramIsFoundBetweenItsMarkers()
    {
        string program = ReadmeProgram("text\n<!-- embedding-example:begin -->\n```csharp\nusing X;\n\nvar y = 1;\n```\n<!-- embedding-example:end -->\nmore");

        Assert.Equal("using X;\n\nvar y = 1;\n", program);
        Assert.Throws<InvalidOperationException>(() => ReadmeProgram("no markers here"));
    }

    /// <summary>The C# block between the README's embedding-example markers, exactly as printed.</summary>
    internal static string ReadmeProgram(string readme)
    {
        const string Begin = "<!-- embedding-example:begin -->";
        const string End = "<!-- embedding-example:end -->";
        int begin = readme.IndexOf(Begin, StringComparison.Ordinal);
        int end = readme.IndexOf(End, StringComparison.Ordinal);
        if (begin < 0 || end < begin)
            throw new InvalidOperationException("the README has no embedding example between its markers");
        string block = readme[(begin + Begin.Length)..end].Replace("\r\n", "\n", StringComparison.Ordinal).Trim('\n');
        const string Fence = "```csharp\n";
        if (!block.StartsWith(Fence, StringComparison.Ordinal) || !block.EndsWith("\n```", StringComparison.Ordinal))
            throw new InvalidOperationException("the README's embedding example is not one csharp code block");
        return block[Fence.Length..^3];
    }

    private static string Configuration =>
        AppContext.BaseDirectory.Contains($"{Path.DirectorySeparatorChar}Release{Path.DirectorySeparatorChar}", StringComparison.Ordinal) ? "Release" : "Debug";

    private static bool IsUnder(string path, string folder) =>
        Path.GetFullPath(path).StartsWith(Path.GetFullPath(folder).TrimEnd(Path.DirectorySeparatorChar) + Path.DirectorySeparatorChar, StringComparison.Ordinal);

    // MSBuild and NuGet read these from every folder above a project; one left in the temp folder would be a hand-made step.
    private static void AssertNoBuildOrNuGetFilesAbove(string folder)
    {
        string[] names = ["Directory.Build.props", "Directory.Build.targets", "Directory.Packages.props", "NuGet.Config", "nuget.config", "NuGet.config"];
        for (var at = new DirectoryInfo(folder); at is not null; at = at.Parent)
        {
            foreach (string name in names)
                Assert.False(File.Exists(Path.Combine(at.FullName, name)), $"{Path.Combine(at.FullName, name)} would take part in the fresh project's build");
        }
    }

    private static void AssertTheProjectIsTheTemplatePlusOneReference(string projectFile)
    {
        var project = XDocument.Load(projectFile).Root!;
        Assert.Empty(project.Descendants("Import"));
        Assert.Empty(project.Descendants("Target"));
        var properties = project.Elements("PropertyGroup").SelectMany(g => g.Elements()).Select(e => e.Name.LocalName).ToList();
        Assert.All(properties, p => Assert.Contains(p, TemplateProperties));
        var items = project.Elements("ItemGroup").SelectMany(g => g.Elements()).ToList();
        var reference = Assert.Single(items);
        Assert.Equal("PackageReference", reference.Name.LocalName);
        Assert.Equal("DriftWatch.Hooks", reference.Attribute("Include")?.Value);
    }

    private static string Run(string folder, params string[] args)
    {
        var (exit, output) = TryRun(folder, args);
        Assert.True(exit == 0, $"dotnet {string.Join(' ', args)} exited {exit} in {folder}:\n{output}");
        return output;
    }

    private static (int Exit, string Output) TryRun(string folder, params string[] args)
    {
        var start = new ProcessStartInfo(Reliability.ChildProcess.DotnetHost())
        {
            WorkingDirectory = folder,
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
        };
        foreach (string arg in args)
            start.ArgumentList.Add(arg);
        // The child is a user's shell, not this test host's build: none of the MSBuild settings `dotnet test` passes down.
        foreach (string name in start.Environment.Keys.Where(k => k.StartsWith("MSBuild", StringComparison.OrdinalIgnoreCase) || k.StartsWith("VSTEST", StringComparison.OrdinalIgnoreCase)).ToList())
            start.Environment.Remove(name);
        start.Environment["MSBUILDDISABLENODEREUSE"] = "1"; // no build node outlives the test
        start.Environment["DOTNET_CLI_TELEMETRY_OPTOUT"] = "1";
        start.Environment["DOTNET_NOLOGO"] = "1";
        start.Environment["DOTNET_EnableDiagnostics"] = "0";
        using var process = Process.Start(start)!;
        var output = new System.Text.StringBuilder();
        process.OutputDataReceived += (_, e) => { if (e.Data is not null) lock (output) output.AppendLine(e.Data); };
        process.ErrorDataReceived += (_, e) => { if (e.Data is not null) lock (output) output.AppendLine(e.Data); };
        process.BeginOutputReadLine();
        process.BeginErrorReadLine();
        // Only a hang reaches this: packing, restoring and building take well under it on a loaded machine.
        if (!process.WaitForExit(TimeSpan.FromMinutes(15)))
        {
            process.Kill(entireProcessTree: true);
            throw new TimeoutException($"dotnet {string.Join(' ', args)} hung in {folder}");
        }
        process.WaitForExit();
        lock (output)
            return (process.ExitCode, output.ToString());
    }

    // The test's own versions leave the machine's NuGet cache as they found it.
    private static void ForgetCachedPackages(string version)
    {
        string cache = Environment.GetEnvironmentVariable("NUGET_PACKAGES")
            ?? Path.Combine(Environment.GetFolderPath(Environment.SpecialFolder.UserProfile), ".nuget", "packages");
        foreach (string id in new[] { "driftwatch.core", "driftwatch.hooks", "driftwatch.charts", "driftwatch.export" })
        {
            string folder = Path.Combine(cache, id, version.ToLowerInvariant());
            if (Directory.Exists(folder))
                Directory.Delete(folder, recursive: true);
            if (Directory.Exists(Path.Combine(cache, id)) && !Directory.EnumerateFileSystemEntries(Path.Combine(cache, id)).Any())
                Directory.Delete(Path.Combine(cache, id));
        }
    }

    [GeneratedRegex(@"^epoch (\d+): (Continue|Caution|Halt)\b", RegexOptions.Multiline)]
    private static partial Regex EpochLine();
}
