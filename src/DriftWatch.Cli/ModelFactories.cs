using System.Reflection;
using System.Runtime.Loader;
using DriftWatch.Charts;

namespace DriftWatch.Cli;

/// <summary>Finds the model factory a run recorded: among the assemblies already loaded, or in the one assembly the user names.</summary>
/// <remarks>No path read from a store is ever loaded: code outside DriftWatch runs only from an assembly the user names with <c>--model-assembly</c>.</remarks>
internal static class ModelFactories
{
    /// <summary>The factory type stored as <c>Namespace.Type, Assembly</c>; <paramref name="followed"/> says the run came from a Python run folder (the message then speaks of it).</summary>
    /// <exception cref="DriftWatchException">The run recorded no factory, the assembly cannot be loaded, or it has no such type.</exception>
    public static Type Resolve(string run, string storedName, string? assemblyPath, bool followed = false)
    {
        if (string.IsNullOrWhiteSpace(storedName) && followed)
        {
            throw new DriftWatchException(
                $"run '{DisplayText.Clean(run)}' was followed from a Python run folder, and its models are the TorchScript snapshots there; pass --run-folder FOLDER (the folder driftwatch_follow.py wrote), or follow the folder again with this version, which records it");
        }
        if (string.IsNullOrWhiteSpace(storedName))
        {
            throw new DriftWatchException(
                $"run '{DisplayText.Clean(run)}' did not record how to rebuild its model; train a ready model family (DriftWatch.Hooks.Models.TabularNet) or set MonitorOptions.Model to a ModelRecipe (an IModelFactory type and its settings), then its snapshots can be re-attributed");
        }
        int comma = storedName.LastIndexOf(", ", StringComparison.Ordinal);
        string typeName = comma < 0 ? storedName : storedName[..comma];
        string assemblyName = comma < 0 ? "" : storedName[(comma + 2)..];

        if (assemblyPath is null)
        {
            // The hook library's ready model families (TabularNet) are DriftWatch's own: make sure their assembly is loaded.
            _ = typeof(Hooks.Models.TabularNetFactory).Assembly;
            var type = AppDomain.CurrentDomain.GetAssemblies()
                .Where(a => assemblyName.Length == 0 || a.GetName().Name == assemblyName)
                .Select(a => a.GetType(typeName, throwOnError: false))
                .FirstOrDefault(t => t is not null);
            return type ?? throw new DriftWatchException(
                $"run '{DisplayText.Clean(run)}' rebuilds its model with '{DisplayText.Clean(typeName)}' from assembly '{DisplayText.Clean(assemblyName)}', which is not part of DriftWatch; pass --model-assembly PATH naming that assembly's .dll (built beside its dependencies)");
        }

        string full = Path.GetFullPath(assemblyPath);
        if (!File.Exists(full))
            throw new DriftWatchException($"--model-assembly '{DisplayText.Clean(full)}' does not exist; pass the path of the .dll that holds '{DisplayText.Clean(typeName)}'");
        var assembly = Load(full);
        return assembly.GetType(typeName, throwOnError: false)
            ?? throw new DriftWatchException(
                $"--model-assembly '{DisplayText.Clean(full)}' ({DisplayText.Clean(assembly.GetName().Name ?? "")}) has no type '{DisplayText.Clean(typeName)}', the model factory run '{DisplayText.Clean(run)}' recorded (from assembly '{DisplayText.Clean(assemblyName)}')");
    }

    private static Assembly Load(string path)
    {
        AssemblyName name;
        try
        {
            name = AssemblyName.GetAssemblyName(path);
        }
        catch (BadImageFormatException e)
        {
            throw new DriftWatchException($"--model-assembly '{DisplayText.Clean(path)}' is not a .NET assembly", e);
        }
        // An assembly the process already has (DriftWatch's own, or the caller's in-process use) is used as it is.
        var loaded = AppDomain.CurrentDomain.GetAssemblies().FirstOrDefault(a => a.GetName().Name == name.Name);
        if (loaded is not null)
            return loaded;
        try
        {
            return new ModelLoadContext(path).LoadFromAssemblyPath(path);
        }
        catch (Exception e) when (e is FileLoadException or BadImageFormatException or FileNotFoundException)
        {
            throw new DriftWatchException($"--model-assembly '{DisplayText.Clean(path)}' could not be loaded: {e.Message}", e);
        }
    }

    // Resolves the model assembly's own dependencies from its folder (its .deps.json), but shares every assembly the CLI
    // itself can load (DriftWatch.Core, TorchSharp), so the factory's IModelFactory and tensors are the CLI's.
    private sealed class ModelLoadContext(string path) : AssemblyLoadContext("driftwatch-model", isCollectible: false)
    {
        private readonly AssemblyDependencyResolver _resolver = new(path);

        protected override Assembly? Load(AssemblyName assemblyName)
        {
            try
            {
                return Default.LoadFromAssemblyName(assemblyName);
            }
            catch (FileNotFoundException)
            {
                string? resolved = _resolver.ResolveAssemblyToPath(assemblyName);
                return resolved is null ? null : LoadFromAssemblyPath(resolved);
            }
        }

        protected override IntPtr LoadUnmanagedDll(string unmanagedDllName)
        {
            string? resolved = _resolver.ResolveUnmanagedDllToPath(unmanagedDllName);
            return resolved is null ? IntPtr.Zero : LoadUnmanagedDllFromPath(resolved);
        }
    }
}
