using System.Diagnostics;
using DriftWatch.Cli;
using DriftWatch.Tests.Demo;
using DriftWatch.Tests.Reliability;
using DriftWatch.Tests.Support;
using Xunit;
using Xunit.Abstractions;
using static DriftWatch.Tests.Sharding.ShardKit;

namespace DriftWatch.Tests.Sharding;

/// <summary>
/// The hook's batch script on a real Slurm scheduler: a 4-task job array re-attributes a demo run shard by shard, and
/// the merged shards equal the re-attribution done on one machine.
/// </summary>
/// <remarks>
/// Needs Slurm's <c>sbatch</c> and a cluster that answers (<c>bash .ci/slurm-up</c> starts a single-node one and prints
/// the <c>SLURM_CONF</c> to export; <c>.ci/run</c> installs Debian's slurm-wlm and munge, starts it and stops it). Where
/// there is none the test is skipped with the reason, except when the <c>CI</c> environment variable is set: then it fails.
/// </remarks>
[Collection(DemoStoreCollection.Name)]
public sealed class SlurmArrayTests
{
    // Only a hang should ever reach it: four small shards take seconds.
    private static readonly TimeSpan HangLimit = TimeSpan.FromMinutes(10);

    private readonly DemoStoreFixture _fixture;
    private readonly ITestOutputHelper _log;

    public SlurmArrayTests(DemoStoreFixture fixture, ITestOutputHelper log)
    {
        _fixture = fixture;
        _log = log;
    }

    [SkippableFact]
    public void AFourTaskJobArrayOfTheHookScriptMergesToTheSingleMachineResult()
    {
        string sbatch = RequireCluster();
        using var temp = new TempFolder();
        string source = temp.File("source.litedb");
        File.Copy(_fixture.StorePath, source);
        string shards = temp.File("shards");
        string script = Path.Combine(ConventionTests.FindRepositoryRoot(), "hooks", "driftwatch-shard.sbatch");

        // The tasks run the CLI these tests were built with, named to the batch script by DRIFTWATCH_COMMAND.
        var (code, output) = Run(sbatch,
            ["--wait", "--array=0-3", "--job-name=driftwatch-test", $"--chdir={temp.Path}", $"--output={temp.Path}/task-%a.out",
                script, "reattribute", DemoStoreFixture.CleanRun, "--store", source, .. Method,
                "--shard-folder", shards, "--model-assembly", ChildProcess.DemoDll],
            new Dictionary<string, string> { ["DRIFTWATCH_COMMAND"] = $"'{ChildProcess.DotnetHost()}' '{ChildProcess.CliDll}'" });
        string tasks = string.Join("\n", Enumerable.Range(0, 4).Select(k => temp.File($"task-{k}.out")).Where(File.Exists).Select(File.ReadAllText));
        _log.WriteLine(output);
        _log.WriteLine(tasks);

        Assert.True(code == 0, $"sbatch --wait exited {code}: {output}\n{tasks}");
        for (int k = 0; k < 4; k++)
        {
            Assert.Contains($"driftwatch-shard: task {k} of 4 on ", File.ReadAllText(temp.File($"task-{k}.out")));
            Assert.True(File.Exists(Path.Combine(shards, $"shard-{k}-of-4.litedb")), $"shard {k} wrote no store:\n{tasks}");
        }
        var merge = RunCli(["merge", .. Directory.GetFiles(shards, "shard-*-of-4.litedb"), "--into", source]);
        Assert.True(merge.Code == ExitCodes.Fine, merge.Error + merge.Output);
        string whole = WholeReattribution(_fixture, Method);
        var expected = Documents(whole, DemoStoreFixture.CleanRun, StoredName, withIds: true);
        Assert.Equal(2 * Epochs(source, DemoStoreFixture.CleanRun).Count, expected.Count);
        Assert.Equal(expected, Documents(source, DemoStoreFixture.CleanRun, StoredName, withIds: true));
    }

    [Fact]
    public void TheBatchScriptRefusesATaskOutsideAJobArray()
    {
        // No cluster needed: the script checks its task number before it runs anything.
        string script = Path.Combine(ConventionTests.FindRepositoryRoot(), "hooks", "driftwatch-shard.sbatch");
        var (code, output) = Run("/bin/bash", [script, "reattribute", "night-7"], new Dictionary<string, string>
        {
            ["SLURM_ARRAY_TASK_ID"] = "4",
            ["SLURM_ARRAY_TASK_COUNT"] = "4",
            ["DRIFTWATCH_COMMAND"] = "echo",
        });
        var (ok, echoed) = Run("/bin/bash", [script, "reattribute", "night 7", "--store", "a b.litedb"], new Dictionary<string, string>
        {
            ["SLURM_ARRAY_TASK_ID"] = "2",
            ["SLURM_ARRAY_TASK_COUNT"] = "1",
            ["DRIFTWATCH_SHARDS"] = "4",
            ["DRIFTWATCH_COMMAND"] = "printf '[%s]'",
        });

        Assert.Equal(2, code);
        Assert.Contains("not a task of a job array numbered from 0", output);
        Assert.Equal(0, ok);
        Assert.Contains("[reattribute][night 7][--store][a b.litedb][--shard][2/4]", echoed); // re-running one task of four keeps N = 4
    }

    // Slurm must be installed and answer; otherwise skip with the reason, or fail when CI is set.
    private static string RequireCluster()
    {
        string? sbatch = new[] { "/usr/bin/sbatch", "/usr/local/bin/sbatch" }.FirstOrDefault(File.Exists);
        string? problem = null;
        if (sbatch is null)
        {
            problem = "Slurm is not installed (apt-get install -y slurm-wlm munge, then bash .ci/slurm-up)";
        }
        else
        {
            var (code, output) = Run(Path.Combine(Path.GetDirectoryName(sbatch)!, "sinfo"), ["-h", "-o", "%a %t"], []);
            if (code != 0 || !output.Contains("up", StringComparison.Ordinal))
                problem = $"Slurm is installed but no cluster answers (sinfo exited {code}: {output.Trim().Split('\n')[0]}); start one with bash .ci/slurm-up and export the SLURM_CONF it prints";
        }
        if (problem is null)
            return sbatch!;
        Assert.False(Environment.GetEnvironmentVariable("CI") is { Length: > 0 }, $"CI must run the Slurm test: {problem}; .ci/run installs and starts the test cluster");
        Skip.If(true, problem);
        return "";
    }

    private static (int Code, string Output) Run(string program, IEnumerable<string> args, Dictionary<string, string> environment)
    {
        var start = new ProcessStartInfo(program)
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
        };
        foreach (string arg in args)
            start.ArgumentList.Add(arg);
        foreach (var (name, value) in environment)
            start.Environment[name] = value;
        using var process = Process.Start(start) ?? throw new InvalidOperationException($"{program} did not start");
        var error = process.StandardError.ReadToEndAsync();
        string output = process.StandardOutput.ReadToEnd();
        if (!process.WaitForExit(HangLimit))
        {
            process.Kill(entireProcessTree: true);
            throw new TimeoutException($"{program} still ran after {HangLimit.TotalMinutes} minutes (a hang)");
        }
        return (process.ExitCode, output + error.Result);
    }
}
