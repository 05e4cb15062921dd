using System.Text.RegularExpressions;
using System.Xml.Linq;
using Xunit;

namespace DriftWatch.Tests.Conventions;

public sealed partial class NamespaceFolderTests
{
    private static readonly string[] ProjectFolders = ["src", "hooks", "demo"];

    [Fact]
    public void EverySourceFilesNamespaceIsItsProjectsRootNamespacePlusItsFolder()
    {
        string root = ConventionTests.FindRepositoryRoot();
        var projects = ProjectFolders.SelectMany(f => Directory.EnumerateFiles(Path.Combine(root, f), "*.csproj", SearchOption.AllDirectories)).ToList();
        Assert.True(projects.Count >= 6, $"expected the shipped projects under {string.Join(", ", ProjectFolders)}; found {projects.Count}");

        var offenders = Offenders(root, projects);
        Assert.Empty(offenders);
    }

    [Fact]
    public void ANamespaceThatLeavesOutItsFolderIsCaught()
    {
        // The report's folder once declared its parent's namespace; a small project of the same shape must be flagged.
        string root = Path.Combine(Path.GetTempPath(), "driftwatch-namespaces-" + Guid.NewGuid().ToString("N"));
        try
        {
            Directory.CreateDirectory(Path.Combine(root, "Sample", "Report"));
            string project = Path.Combine(root, "Sample", "Sample.csproj");
            File.WriteAllText(project, "<Project Sdk=\"Microsoft.NET.Sdk\"><PropertyGroup><RootNamespace>Acme.Charts</RootNamespace></PropertyGroup></Project>");
            File.WriteAllText(Path.Combine(root, "Sample", "Chart.cs"), "namespace Acme.Charts;\n\npublic static class Chart { }\n");
            File.WriteAllText(Path.Combine(root, "Sample", "Report", "RunReport.cs"), "using X;\n\nnamespace Acme.Charts;\n\npublic static class RunReport { }\n");

            var offenders = Offenders(root, [project]);

            string offender = Assert.Single(offenders);
            Assert.Equal($"{Path.Combine("Sample", "Report", "RunReport.cs")}: declares Acme.Charts; expected Acme.Charts.Report", offender);
        }
        finally
        {
            Directory.Delete(root, recursive: true);
        }
    }

    private static List<string> Offenders(string root, IEnumerable<string> projects)
    {
        var offenders = new List<string>();
        foreach (string project in projects)
        {
            string folder = Path.GetDirectoryName(project)!;
            string rootNamespace = RootNamespace(project);
            foreach (string file in SourceFiles(folder))
            {
                string relative = Path.GetRelativePath(folder, Path.GetDirectoryName(file)!);
                string expected = relative == "." ? rootNamespace : rootNamespace + "." + relative.Replace(Path.DirectorySeparatorChar, '.');
                var declared = NamespaceDeclaration().Matches(File.ReadAllText(file)).Select(m => m.Groups[1].Value).ToList();
                // A program of top-level statements declares no namespace; it holds no type others use.
                if (declared.Count == 0 && Path.GetFileName(file) == "Program.cs" && relative == ".")
                    continue;
                if (declared.Count != 1 || declared[0] != expected)
                    offenders.Add($"{Path.GetRelativePath(root, file)}: declares {(declared.Count == 0 ? "no namespace" : string.Join(", ", declared))}; expected {expected}");
            }
        }
        return offenders;
    }

    private static string RootNamespace(string project)
    {
        string? declared = XDocument.Load(project).Descendants("RootNamespace").Select(e => e.Value).FirstOrDefault();
        return declared ?? Path.GetFileNameWithoutExtension(project);
    }

    private static IEnumerable<string> SourceFiles(string folder) =>
        Directory.EnumerateFiles(folder, "*.cs", SearchOption.AllDirectories)
            .Where(f => !Path.GetRelativePath(folder, f).Split(Path.DirectorySeparatorChar).Any(part => part is "bin" or "obj"));

    [GeneratedRegex(@"^namespace\s+([\w.]+)\s*[;{]", RegexOptions.Multiline)]
    private static partial Regex NamespaceDeclaration();
}
