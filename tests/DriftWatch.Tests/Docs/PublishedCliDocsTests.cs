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

        var offenders = documents.SelectMany(d => File.ReadLines(d).Select((line, i) => (d, line, i)))
            .Where(x => x.line.Contains("--project src/DriftWatch.Cli", StringComparison.Ordinal) && x.line.Contains("dotnet run", StringComparison.Ordinal))
            .Select(x => $"{Path.GetRelativePath(root, x.d)}:{x.i + 1}: {x.line.Trim()}").ToList();

        Assert.Empty(offenders);
    }
}
