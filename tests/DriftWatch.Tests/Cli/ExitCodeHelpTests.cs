using System.CommandLine;
using System.Reflection;
using System.Text.RegularExpressions;
using DriftWatch.Cli;
using Xunit;

namespace DriftWatch.Tests.Cli;

public sealed partial class ExitCodeHelpTests
{
    private static readonly Dictionary<string, int> Codes = typeof(ExitCodes)
        .GetFields(BindingFlags.Public | BindingFlags.Static)
        .Where(f => f.IsLiteral && f.FieldType == typeof(int))
        .ToDictionary(f => f.Name, f => (int)f.GetRawConstantValue()!, StringComparer.Ordinal);

    public static TheoryData<string> Commands()
    {
        var data = new TheoryData<string>();
        foreach (var command in CliApp.Build().Subcommands)
            data.Add(command.Name);
        return data;
    }

    [Theory]
    [MemberData(nameof(Commands))]
    public void EachCommandsHelpListsTheCodesItReturns(string name)
    {
        var command = CliApp.Build().Subcommands.Single(c => c.Name == name);
        var listed = ListedCodes(command.Description!);

        // Every command can meet bad input and an internal error (CliApp turns both into their codes); the rest it returns itself.
        var returned = ReturnedCodes(SourceOf(name)).Append(ExitCodes.BadInput).Append(ExitCodes.InternalError).Distinct().Order().ToList();
        Assert.Equal(returned, listed);
    }

    [Fact]
    public void TheRootHelpListsEveryCode()
    {
        var listed = ListedCodes(CliApp.Build().Description!);
        Assert.Equal(Codes.Values.Order(), listed);
    }

    [Fact]
    public void NoHelpTextWritesAnExitCodeNumberByHand()
    {
        string folder = Path.Combine(ConventionTests.FindRepositoryRoot(), "src", "DriftWatch.Cli");
        var offenders = Directory.EnumerateFiles(folder, "*.cs")
            .Where(f => Path.GetFileName(f) != "ExitCodes.cs")
            .SelectMany(f => File.ReadAllLines(f).Select((line, i) => (File: Path.GetFileName(f), Line: i + 1, Text: line)))
            .Where(l => HandWrittenCode().IsMatch(l.Text))
            .Select(l => $"{l.File}:{l.Line}: {l.Text.Trim()}")
            .ToList();
        Assert.Empty(offenders);
    }

    [Fact]
    public void TheListIsReadBackAsWritten()
    {
        string help = ExitCodes.Help((ExitCodes.Fine, "done"), (ExitCodes.Halt, "Halt advised"), (ExitCodes.BadInput, "bad input (a; b)"));
        Assert.Equal("Exit codes: 0 done; 1 Halt advised; 2 bad input (a; b).", help);
        Assert.Equal([0, 1, 2], ListedCodes(help));
    }

    // The numbers of the one "Exit codes: …" line, each a code ExitCodes defines, in increasing order.
    private static List<int> ListedCodes(string description)
    {
        var lines = description.Split('\n').Where(l => l.Contains("Exit codes:", StringComparison.Ordinal)).ToList();
        string line = Assert.Single(lines);
        var codes = ListedCode().Matches(line[line.IndexOf("Exit codes:", StringComparison.Ordinal)..]).Select(m => int.Parse(m.Groups[1].Value, System.Globalization.CultureInfo.InvariantCulture)).ToList();
        Assert.NotEmpty(codes);
        Assert.All(codes, c => Assert.Contains(c, Codes.Values));
        Assert.Equal(codes.Order(), codes);
        return codes;
    }

    private static IEnumerable<int> ReturnedCodes(string source) =>
        ReturnStatement().Matches(source).SelectMany(m => CodeName().Matches(m.Value)).Select(m => Codes[m.Groups[1].Value]);

    private static string SourceOf(string command)
    {
        string file = char.ToUpperInvariant(command[0]) + command[1..] + "Command.cs";
        return File.ReadAllText(Path.Combine(ConventionTests.FindRepositoryRoot(), "src", "DriftWatch.Cli", file));
    }

    // An entry starts the list or follows "; " at the top level (a meaning may hold "; " inside parentheses).
    [GeneratedRegex(@"(?:Exit codes: |; (?![^()]*\)))(\d+) ")]
    private static partial Regex ListedCode();

    [GeneratedRegex(@"\breturn\b[^;]*;")]
    private static partial Regex ReturnStatement();

    [GeneratedRegex(@"ExitCodes\.(\w+)")]
    private static partial Regex CodeName();

    // "exit 1", "exit code 4", "Exit codes: 0", "-eq 1" inside a string: a number a person typed instead of ExitCodes'.
    [GeneratedRegex(@"""[^""]*(?:\b[Ee]xit(?: codes?:?)? \d|-eq \d)")]
    private static partial Regex HandWrittenCode();
}
