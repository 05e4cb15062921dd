using DriftWatch.Demo;
using Xunit;

namespace DriftWatch.Tests.Docs;

/// <summary>The documents run the command line the set-up publishes, never a build of it.</summary>
public sealed class PublishedCliDocsTests
{
    [Fact]
    public void TheSetUpPublishesTheProgramTheDemoPointsAt()
    {
        string readme = File.ReadAllText(Path.Combine(ConventionTests.FindRepositoryRoot(), "README.md"));
        string setUp = readme[readme.IndexOf("## Set-up", StringComparison.Ordinal)..readme.IndexOf("## A caution", StringComparison.Ordinal)];

        Assert.Contains(CliCommand.PublishCommand, setUp, StringComparison.Ordinal);
        Assert.Contains($"export PATH=\"$PWD/{Path.GetDirectoryName(CliCommand.PublishedPath)}:$PATH\"", setUp, StringComparison.Ordinal);
    }

    [Fact]
    public void NoDocumentRunsTheCommandLineThroughABuild()
    {
        string root = ConventionTests.FindRepositoryRoot();
        var documents = Directory.GetFiles(Path.Combine(root, "docs"), "*.md").Append(Path.Combine(root, "README.md")).Append(Path.Combine(root, "DEVELOPERS.md"));

        // Commands to type are in fenced blocks; prose may name `dotnet run` (the benchmark compares against it).
        var offenders = documents.SelectMany(d => CodeLines(File.ReadAllLines(d)).Select(x => (d, x.Line, x.Number)))
            .Where(x => x.Line.Contains("--project src/DriftWatch.Cli", StringComparison.Ordinal) && x.Line.Contains("dotnet run", StringComparison.Ordinal))
            .Select(x => $"{Path.GetRelativePath(root, x.d)}:{x.Number}: {x.Line.Trim()}").ToList();

        Assert.Empty(offenders);
        var sample = CodeLines(["text dotnet run", "```sh", "a", "dotnet run x", "```", "b"]).ToList();
        Assert.Equal(new[] { 3, 4 }, sample.Select(x => x.Number));
    }

    private static IEnumerable<(string Line, int Number)> CodeLines(IReadOnlyList<string> lines)
    {
        bool inside = false;
        for (int i = 0; i < lines.Count; i++)
        {
            if (lines[i].TrimStart().StartsWith("```", StringComparison.Ordinal))
                inside = !inside;
            else if (inside)
                yield return (lines[i], i + 1);
        }
    }
}
