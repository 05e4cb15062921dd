using System.Diagnostics;
using Xunit;

namespace DriftWatch.Tests.Support;

/// <summary>
/// Debian's Chromium run headless on a local file: the DOM after the page's scripts ran, and the browser's log.
/// Tests skip with a message where no Chromium exists, except in CI (CI=true), where a missing browser fails.
/// </summary>
internal static class HeadlessChromium
{
    /// <summary>The browser: $DRIFTWATCH_CHROMIUM, else /usr/bin/chromium, else null.</summary>
    public static string? Executable
    {
        get
        {
            string? named = Environment.GetEnvironmentVariable("DRIFTWATCH_CHROMIUM");
            if (!string.IsNullOrWhiteSpace(named))
                return File.Exists(named) ? named : null;
            return File.Exists("/usr/bin/chromium") ? "/usr/bin/chromium" : null;
        }
    }

    /// <summary>Skips the test where there is no browser; fails instead when running in CI.</summary>
    public static string Require()
    {
        string? executable = Executable;
        if (executable is not null)
            return executable;
        Assert.False(
            string.Equals(Environment.GetEnvironmentVariable("CI"), "true", StringComparison.OrdinalIgnoreCase),
            "CI=true but no Chromium at /usr/bin/chromium: .ci/run installs Debian's chromium package; the browser test must run in CI");
        Skip.If(true, "no Chromium found (install Debian's chromium package, or set DRIFTWATCH_CHROMIUM): the report was not checked in a browser");
        return "";
    }

    /// <summary>Loads <paramref name="file"/> and returns the serialised DOM and everything the browser logged.</summary>
    public static (string Dom, string Log) DumpDom(string executable, string file)
    {
        using var profile = new TempFolder();
        var start = new ProcessStartInfo(executable)
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
        };
        foreach (string argument in new[]
        {
            "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
            "--disable-sync", "--no-first-run", "--user-data-dir=" + profile.Path, "--enable-logging=stderr", "--v=0",
            "--virtual-time-budget=10000", "--dump-dom", new Uri(Path.GetFullPath(file)).AbsoluteUri,
        })
        {
            start.ArgumentList.Add(argument);
        }
        using var process = Process.Start(start) ?? throw new InvalidOperationException("Chromium did not start");
        var error = process.StandardError.ReadToEndAsync();
        string dom = process.StandardOutput.ReadToEnd();
        if (!process.WaitForExit(120_000))
        {
            process.Kill(entireProcessTree: true);
            throw new TimeoutException("Chromium did not finish within two minutes");
        }
        return (dom, error.Result);
    }
}
