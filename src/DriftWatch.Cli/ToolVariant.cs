using System.Reflection;
using System.Runtime.InteropServices;

namespace DriftWatch.Cli;

/// <summary>
/// Which driftwatch this is: the full tool (package DriftWatch.Cli, libtorch inside) or the lean one (package
/// DriftWatch.Cli.Lean, built with <c>-p:DriftWatchLeanTool=true</c>), and where the lean one finds libtorch for the
/// commands that run a model.
/// </summary>
internal static class ToolVariant
{
    /// <summary>The environment variable naming a folder with libtorch and TorchSharp's libLibTorchSharp.so, for the lean tool.</summary>
    public const string LibTorchVariable = "DRIFTWATCH_LIBTORCH";

    /// <summary>The commands that run a model, so need libtorch.</summary>
    public static readonly IReadOnlySet<string> ModelCommands = new HashSet<string>(StringComparer.Ordinal) { "reattribute", "follow", "prune" };

    // libtorch's libraries in the order each needs the ones before it, then TorchSharp's own.
    private static readonly string[] Libraries = ["libc10.so", "libtorch_cpu.so", "libtorch.so", "libLibTorchSharp.so"];

    private static readonly Dictionary<string, IntPtr> Loaded = new(StringComparer.Ordinal);

    /// <summary>True for the lean tool, which leaves libtorch out.</summary>
    public static bool IsLean { get; } = typeof(ToolVariant).Assembly.GetCustomAttributes<AssemblyMetadataAttribute>()
        .Any(a => a.Key == "DriftWatchVariant" && a.Value == "lean");

    /// <summary>The line <c>--version</c> prints: version, package and what the variant carries.</summary>
    public static string VersionLine
    {
        get
        {
            string version = typeof(ToolVariant).Assembly.GetCustomAttribute<AssemblyInformationalVersionAttribute>()?.InformationalVersion ?? "unknown";
            int plus = version.IndexOf('+', StringComparison.Ordinal);
            string shortVersion = plus < 0 ? version : version[..plus];
            return IsLean
                ? $"driftwatch {shortVersion} lean (package DriftWatch.Cli.Lean): reads stores; reattribute, follow and prune need libtorch from ${LibTorchVariable}"
                : $"driftwatch {shortVersion} full (package DriftWatch.Cli): carries libtorch; every command works";
        }
    }

    /// <summary>
    /// Before a command that runs a model: in the lean tool, loads libtorch from <see cref="LibTorchVariable"/>, or throws
    /// one line naming what is missing. The full tool has it beside the program and does nothing here.
    /// </summary>
    /// <param name="command">The command about to run.</param>
    /// <exception cref="DriftWatchException">The lean tool, and no usable libtorch folder named.</exception>
    public static void EnsureLibTorch(string command)
    {
        string? folder = Environment.GetEnvironmentVariable(LibTorchVariable);
        if (!Needs(command, IsLean, folder))
            return;
        lock (Loaded)
        {
            if (Loaded.Count > 0)
                return;
            foreach (string library in Libraries)
            {
                string path = Path.Combine(folder!, library);
                if (!NativeLibrary.TryLoad(path, out IntPtr handle))
                    throw new DriftWatchException($"{LibTorchVariable}: '{DisplayTextOf(path)}' does not load on this system (on Debian 12 use a folder a DriftWatch build wrote, whose copy is patched; see docs/troubleshooting.md)");
                Loaded[Path.GetFileNameWithoutExtension(library)] = handle;
            }
            NativeLibrary.SetDllImportResolver(typeof(TorchSharp.torch).Assembly, Resolve);
        }
    }

    /// <summary>
    /// Whether <paramref name="command"/> must load libtorch from <paramref name="folder"/> first: only in the lean tool,
    /// only for a command that runs a model, and only on Linux (the lean tool's platform).
    /// </summary>
    /// <exception cref="DriftWatchException">It must, and <paramref name="folder"/> is unset or lacks a library; the message names which.</exception>
    internal static bool Needs(string command, bool lean, string? folder)
    {
        if (!lean || !ModelCommands.Contains(command) || !OperatingSystem.IsLinux())
            return false;
        string advice = $"install the full tool (package DriftWatch.Cli), or set {LibTorchVariable} to a folder holding libtorch and TorchSharp's libLibTorchSharp.so, such as a full driftwatch's folder (README, Set-up: .driftwatch/bin)";
        if (string.IsNullOrEmpty(folder))
            throw new DriftWatchException($"'{command}' runs a model and needs libtorch, which this lean driftwatch leaves out; {advice}");
        var missing = Libraries.Where(l => !File.Exists(Path.Combine(folder, l))).ToList();
        if (missing.Count > 0)
            throw new DriftWatchException($"{LibTorchVariable}='{DisplayTextOf(folder)}' has no {string.Join(", ", missing)}; {advice}");
        return true;
    }

    private static IntPtr Resolve(string name, Assembly assembly, DllImportSearchPath? path)
    {
        lock (Loaded)
        {
            foreach (var (library, handle) in Loaded)
            {
                if (string.Equals(name, library, StringComparison.Ordinal) || string.Equals("lib" + name, library, StringComparison.Ordinal))
                    return handle;
            }
        }
        return IntPtr.Zero;
    }

    private static string DisplayTextOf(string text) => DriftWatch.Charts.DisplayText.Clean(text);
}
