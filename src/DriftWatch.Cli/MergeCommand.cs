using System.CommandLine;
using DriftWatch.Charts;
using DriftWatch.Sharding;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch merge SHARD… --into STORE</c>: joins the shard stores of one split re-attribution into the run's store.</summary>
internal static class MergeCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create()
    {
        var shards = new Argument<string[]>("shard-stores")
        {
            Description = "The shard stores 'reattribute --shard K/N' wrote (shard-K-of-N.litedb), in any order; a shell pattern such as shards/shard-*-of-4.litedb is fine. Only read.",
            Arity = ArgumentArity.OneOrMore,
        };
        var into = new Option<string>("--into")
        {
            Description = "The store the shards were cut from (the --store reattribute read), which receives their maps.",
            HelpName = "STORE",
            Required = true,
        };
        var command = new Command(
            "merge",
            "Join the shard stores of one split re-attribution into the run's store. Every shard must come from the same run (name, probe hash, "
            + "feature schema, model settings) and the same method settings and split as the others and as the target; otherwise nothing is written. "
            + "Maps the target already has under that name are left as they were, so merging again changes nothing; the shard stores are only read. "
            + "Missing shards and epochs are named, with the command that fills them in.\n"
            + "Examples:\n"
            + "  driftwatch reattribute night-7 --store runs.litedb --method shapley-sampling --shard 0/4 --shard-folder shards   # … up to 3/4\n"
            + "  driftwatch merge shards/shard-*-of-4.litedb --into runs.litedb\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "merged, every epoch of the job is there"),
                (ExitCodes.BadInput, "bad input (a missing, foreign or non-shard store, shards of different runs, methods or splits, a target without that run), nothing written"),
                (ExitCodes.InternalError, "internal error"),
                (ExitCodes.Incomplete, "merged what was given, but shards or epochs are still missing")))
        {
            shards,
            into,
        };
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            string target = Path.GetFullPath(parse.GetValue(into)!);
            var paths = new List<string>();
            foreach (string given in parse.GetValue(shards)!)
            {
                string full = Path.GetFullPath(given);
                if (!File.Exists(full))
                    throw new DriftWatchException($"shard store '{full}' does not exist; pass the files 'reattribute --shard K/N' wrote");
                if (full == target)
                    throw new DriftWatchException($"'{full}' is given both as a shard store and as --into; the target is the store the shards were cut from");
                if (!paths.Contains(full))
                    paths.Add(full);
            }
            if (!File.Exists(target))
                throw new DriftWatchException($"target store '{target}' does not exist; --into names the store the shards were cut from (the --store reattribute read)");

            MergePlan plan;
            var stores = new List<RunStore>();
            try
            {
                foreach (string path in paths)
                    stores.Add(RunStore.OpenForReading(path));
                using var reading = RunStore.OpenForReading(target);
                plan = ShardMerge.Plan(stores, reading);
            }
            finally
            {
                foreach (var store in stores)
                    store.Dispose();
            }
            if (plan.Maps.Count > 0)
            {
                using var writing = RunStore.OpenForWriting(target);
                ShardMerge.Apply(writing, plan);
            }
            WriteSummary(output, plan, paths.Count, target);
            return plan.Complete ? ExitCodes.Fine : ExitCodes.Incomplete;
        });
        return command;
    }

    private static void WriteSummary(TextWriter output, MergePlan plan, int shardStores, string target)
    {
        var job = plan.Job;
        string run = DisplayText.Clean(job.RunName);
        output.WriteLine($"run {run}: merged {Formats.Integer(shardStores)} of {Formats.Integer(job.Count)} shard stores ({DisplayText.Clean(job.Method)}, stored as '{DisplayText.Clean(job.StoredName)}') into {DisplayText.Clean(target)}: "
            + $"{Formats.Integer(plan.Maps.Count)} maps added, {Formats.Integer(plan.AlreadyInTarget.Count)} already there and left as they were");
        string again = $"driftwatch reattribute {run} --method {DisplayText.Clean(job.Method)} … --shard";
        foreach (var missing in plan.MissingShards)
            output.WriteLine($"  missing: {missing.Shard.Name}.litedb (shard {missing.Shard}, epochs {Shard.Describe(missing.Epochs)}) was not given; run '{again} {missing.Shard}' and merge again");
        foreach (var incomplete in plan.IncompleteShards)
            output.WriteLine($"  incomplete: {DisplayText.Clean(Path.GetFileName(incomplete.Path))} (shard {incomplete.Shard}) has no maps for epochs {Shard.Describe(incomplete.Epochs)}; its task stopped early: run '{again} {incomplete.Shard}' again and merge again");
        if (plan.NoSnapshot.Count > 0)
            output.WriteLine($"  no weight snapshot, nothing to compute: epochs {Shard.Describe(plan.NoSnapshot)}");
        if (plan.Complete)
            output.WriteLine($"  complete: every epoch of the job ({Shard.Describe(job.JobEpochs)}) has its map; see them with: driftwatch show {run} --method {DisplayText.Clean(job.StoredName)} --store {DisplayText.Clean(target)}");
        else
            output.WriteLine($"  incomplete: the epochs above have no map yet (exit code {ExitCodes.Incomplete})");
    }
}
