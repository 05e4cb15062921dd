using System.Diagnostics;

namespace DriftWatch.Tests.Reliability;

/// <summary>A program of this repository (the demo, the CLI) run as a real child process, its output read line by line.</summary>
internal sealed class ChildProcess : IDisposable
{
    // Generous: only a hang should ever reach it.
    public static readonly TimeSpan HangLimit = TimeSpan.FromMinutes(3);

    private readonly Process _process;
    private readonly List<string> _lines = [];
    private readonly System.Text.StringBuilder _error = new();
    private readonly SemaphoreSlim _lineArrived = new(0);

    private ChildProcess(Process process)
    {
        _process = process;
        Started = Stopwatch.StartNew();
    }

    /// <summary>The demo's assembly, built beside the test assembly (the test project references the demo).</summary>
    public static string DemoDll => Path.Combine(AppContext.BaseDirectory, "DriftWatch.Demo.dll");

    /// <summary>The CLI's assembly, built beside the test assembly.</summary>
    public static string CliDll => Path.Combine(AppContext.BaseDirectory, "driftwatch.dll");

    /// <summary>Time since the process was started.</summary>
    public Stopwatch Started { get; }

    public int Id => _process.Id;

    /// <summary>Standard output so far, one entry per line.</summary>
    public IReadOnlyList<string> Lines
    {
        get
        {
            lock (_lines)
                return [.. _lines];
        }
    }

    public string Error
    {
        get
        {
            lock (_error)
                return _error.ToString();
        }
    }

    public bool HasExited => _process.HasExited;

    /// <summary>Starts <c>dotnet ASSEMBLY args…</c> with the dotnet host that runs the tests.</summary>
    public static ChildProcess Start(string assembly, params string[] args)
    {
        var start = new ProcessStartInfo(DotnetHost())
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
            WorkingDirectory = Path.GetTempPath(),
        };
        // No debugger or diagnostics endpoints: the runtime makes two pipes and a socket in /tmp per process and removes
        // them at exit, so every SIGKILL of the kill suite left three files behind (hundreds per run).
        start.Environment["DOTNET_EnableDiagnostics"] = "0";
        start.ArgumentList.Add(assembly);
        foreach (string arg in args)
            start.ArgumentList.Add(arg);
        var process = new Process { StartInfo = start };
        var child = new ChildProcess(process);
        process.OutputDataReceived += (_, e) =>
        {
            if (e.Data is null)
                return;
            lock (child._lines)
                child._lines.Add(e.Data);
            child._lineArrived.Release();
        };
        process.ErrorDataReceived += (_, e) =>
        {
            if (e.Data is null)
                return;
            lock (child._error)
                child._error.AppendLine(e.Data);
        };
        process.Start();
        process.BeginOutputReadLine();
        process.BeginErrorReadLine();
        return child;
    }

    /// <summary>Waits until <paramref name="count"/> printed lines match; false when the process ended first.</summary>
    public bool WaitForLine(Func<string, bool> match, int count = 1)
    {
        var limit = Stopwatch.StartNew();
        while (true)
        {
            if (Lines.Count(match) >= count)
                return true;
            if (_process.HasExited)
            {
                _process.WaitForExit(); // drain the output
                return Lines.Count(match) >= count;
            }
            if (limit.Elapsed > HangLimit)
                throw new TimeoutException($"process {Id} printed no matching line within {HangLimit}; it hangs");
            _lineArrived.Wait(TimeSpan.FromMilliseconds(50));
        }
    }

    /// <summary>Sends SIGKILL (no handler runs, nothing is flushed) and waits until the process is gone and its output drained.</summary>
    public void Kill()
    {
        try
        {
            _process.Kill(entireProcessTree: false);
        }
        catch (InvalidOperationException)
        {
            // It had already exited.
        }
        _process.WaitForExit();
    }

    /// <summary>Waits for the process to end on its own and returns its exit code.</summary>
    public int WaitForExit()
    {
        if (!_process.WaitForExit(HangLimit))
        {
            Kill();
            throw new TimeoutException($"process {Id} did not finish within {HangLimit}; it hangs");
        }
        _process.WaitForExit();
        return _process.ExitCode;
    }

    public void Dispose()
    {
        if (!_process.HasExited)
            Kill();
        _process.Dispose();
        _lineArrived.Dispose();
    }

    // `dotnet test` names its own host in DOTNET_HOST_PATH; the same host runs the children.
    internal static string DotnetHost()
    {
        string? host = Environment.GetEnvironmentVariable("DOTNET_HOST_PATH");
        if (!string.IsNullOrEmpty(host) && File.Exists(host))
            return host;
        string? current = Environment.ProcessPath;
        return current is not null && Path.GetFileNameWithoutExtension(current) == "dotnet" ? current : "dotnet";
    }
}
