using System.Diagnostics;
using DriftWatch.Demo;
using DriftWatch.Tests.Reliability;
using DriftWatch.Tests.Support;
using Xunit;

namespace DriftWatch.Tests.Demo;

/// <summary>The commands the demo prints run the published command line, rebuild nothing, and work on the demo's store.</summary>
public sealed class PrintedCommandsTests : IClassFixture<DemoStoreFixture>
{
    private readonly DemoStoreFixture _fixture;

    public PrintedCommandsTests(DemoStoreFixture fixture) => _fixture = fixture;

    [Fact]
    public void EveryCommandTheDemoPrintsIsThePublishedProgramAndAnswersOnItsStore()
    {
        var commands = PrintedCommands(_fixture.LeakOutput);

        Assert.Equal(4, commands.Count); // runs, show, chart, neurons
        Assert.All(commands, c => Assert.DoesNotContain("dotnet", c, StringComparison.Ordinal));
        foreach (string command in commands)
        {
            var words = ShellWords(command);
            Assert.True(words[0] is CliCommand.PublishedPath or "driftwatch", command);
            // The program the set-up publishes is this build of the CLI; run it as the test host's dotnet runs its dll.
            var (exit, output) = RunCli(words.Skip(1).ToArray());
            Assert.True(exit == 0, $"'{command}' exited {exit}:\n{output}");
            Assert.NotEmpty(output.Trim());
        }
    }

    [Fact]
    public void ThePrefixIsTheProgramOnThePathThenThePublishedOneWithItsPublishCommandWhenMissing()
    {
        using var temp = new TempFolder();
        string onPath = Directory.CreateDirectory(temp.File("tools")).FullName;
        string repository = Directory.CreateDirectory(temp.File("clone")).FullName;

        Assert.Equal(CliCommand.PublishedPath, CliCommand.Prefix(repository, "/nonexistent", out string? publish));
        Assert.Equal("dotnet publish src/DriftWatch.Cli -c Release -o .driftwatch/bin", publish);

        Directory.CreateDirectory(Path.Combine(repository, ".driftwatch", "bin"));
        File.WriteAllText(Path.Combine(repository, CliCommand.PublishedPath), "");
        Assert.Equal(CliCommand.PublishedPath, CliCommand.Prefix(repository, "/nonexistent", out publish));
        Assert.Null(publish);

        File.WriteAllText(Path.Combine(onPath, "driftwatch"), "");
        Assert.Equal("driftwatch", CliCommand.Prefix(temp.Path, "/nonexistent" + Path.PathSeparator + onPath, out publish));
        Assert.Null(publish);
    }

    private static List<string> PrintedCommands(string output)
    {
        var lines = output.Split('\n').Select(l => l.TrimEnd()).ToList();
        int next = lines.FindIndex(l => l.StartsWith("next ", StringComparison.Ordinal));
        Assert.True(next >= 0, "the demo printed no next commands:\n" + output);
        return [.. lines.Skip(next + 1).Where(l => l.StartsWith("          ", StringComparison.Ordinal)).Select(l => l.Trim())
            .Where(l => !l.StartsWith(CliCommand.PublishCommand, StringComparison.Ordinal))];
    }

    // POSIX shell words for what the demo prints: plain words and single-quoted ones ('\'' for a quote).
    private static List<string> ShellWords(string line)
    {
        var words = new List<string>();
        var word = new System.Text.StringBuilder();
        bool quoted = false, escaped = false, any = false;
        foreach (char c in line)
        {
            if (escaped)
            {
                (escaped, any) = (false, true);
                word.Append(c);
            }
            else if (quoted)
            {
                if (c == '\'')
                    quoted = false;
                else
                    word.Append(c);
            }
            else if (c == '\'')
            {
                (quoted, any) = (true, true);
            }
            else if (c == '\\')
            {
                escaped = true;
            }
            else if (char.IsWhiteSpace(c))
            {
                if (any || word.Length > 0)
                    words.Add(word.ToString());
                word.Clear();
                any = false;
            }
            else
            {
                word.Append(c);
            }
        }
        if (any || word.Length > 0)
            words.Add(word.ToString());
        return words;
    }

    private (int Exit, string Output) RunCli(string[] args)
    {
        var start = new ProcessStartInfo(ChildProcess.DotnetHost())
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
            WorkingDirectory = _fixture.Folder, // `chart` writes its folder where it is run
        };
        start.Environment["DOTNET_EnableDiagnostics"] = "0";
        start.ArgumentList.Add(ChildProcess.CliDll);
        foreach (string arg in args)
            start.ArgumentList.Add(arg);
        using var process = Process.Start(start)!;
        var error = process.StandardError.ReadToEndAsync();
        string output = process.StandardOutput.ReadToEnd();
        process.WaitForExit();
        return (process.ExitCode, output + error.Result);
    }
}
