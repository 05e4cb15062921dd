using System.Collections.Concurrent;
using System.Diagnostics;
using System.Globalization;
using LiteDB;

namespace DriftWatch.Storage;

/// <summary>The live-writer mark of a run: which process writes it now, so that a second writer is refused.</summary>
public sealed partial class RunStore
{
    /// <summary>
    /// How long a writer on another host may go without a heartbeat (one per stored epoch) before it counts as gone and a
    /// new writer may take its run over: 1 hour, unless the writer is given another bound. A writer on this host counts
    /// as gone as soon as its process is.
    /// </summary>
    public static readonly TimeSpan DefaultStaleWriterAfter = TimeSpan.FromHours(1);

    private const string WritersCollection = "writers";

    // This process's writers that have not let go of their run: a writer of this same process whose token is not here
    // (a monitor dropped without being disposed) is gone; one whose token is here still writes.
    private static readonly ConcurrentDictionary<string, byte> LiveTokens = new(StringComparer.Ordinal);

    private static readonly Lazy<DateTime> ProcessStartUtc = new(() =>
    {
        using var process = Process.GetCurrentProcess();
        return process.StartTime.ToUniversalTime();
    });

    private readonly Dictionary<int, string> _claims = [];

    /// <summary>
    /// Marks this process as the run's one live writer, or refuses when another live writer holds the run.
    /// </summary>
    /// <param name="run">The run.</param>
    /// <param name="program">What writes it, one word ("monitor", "reattribute"), for the other writer's refusal.</param>
    /// <param name="nowUtc">Now, from the writer's clock.</param>
    /// <param name="staleAfter">How old another host's heartbeat must be for its writer to count as gone.</param>
    /// <returns>A line saying an earlier writer was gone and this one took over, or null when the run had no writer.</returns>
    /// <exception cref="StoreException">Another process writes the run: one line naming it.</exception>
    internal string? ClaimWriter(RunDocument run, string program, DateTime nowUtc, TimeSpan staleAfter)
    {
        ArgumentNullException.ThrowIfNull(run);
        ArgumentNullException.ThrowIfNull(program);
        string token = Guid.NewGuid().ToString("N");
        string? note = null;
        InOneTransaction(() =>
        {
            var writers = _database.GetCollection(WritersCollection);
            var other = writers.FindById(run.Id);
            if (other is not null)
            {
                var (gone, why) = Gone(other, nowUtc, staleAfter);
                if (!gone)
                {
                    throw new StoreException(
                        $"run '{run.Name}' in '{Path}' is being written by {Describe(other)}; only one process may write a run: wait for it to finish or stop it (a writer gone from its host, or silent for over {Hours(staleAfter)} on another host, is taken over)");
                }
                note = $"the run's earlier writer, {Describe(other)}, {why}; this {program} takes the run over";
            }
            writers.Upsert(new BsonDocument
            {
                ["_id"] = run.Id,
                ["ProcessId"] = Environment.ProcessId,
                ["Host"] = Environment.MachineName,
                ["ProcessStartUtc"] = ProcessStartUtc.Value,
                ["Program"] = program,
                ["Token"] = token,
                ["ClaimedUtc"] = nowUtc,
                ["HeartbeatUtc"] = nowUtc,
            });
        });
        LiveTokens[token] = 0;
        _claims[run.Id] = token;
        return note;
    }

    /// <summary>
    /// Refreshes this writer's heartbeat on the run; call it inside each epoch's transaction, so the epoch is stored only
    /// while this process is still the run's writer.
    /// </summary>
    /// <exception cref="StoreException">Another writer took the run over (this one was silent past its bound): the epoch must not be stored.</exception>
    internal void RefreshWriter(RunDocument run, DateTime nowUtc)
    {
        ArgumentNullException.ThrowIfNull(run);
        if (!_claims.TryGetValue(run.Id, out string? token))
            return;
        Guard(() =>
        {
            var writers = _database.GetCollection(WritersCollection);
            var mark = writers.FindById(run.Id);
            if (mark is not null && mark["Token"].IsString && mark["Token"].AsString != token)
                throw new StoreException($"run '{run.Name}' in '{Path}' was taken over by {Describe(mark)}; this process no longer writes it");
            if (mark is null)
            {
                // The mark was removed (a store edited by hand): this writer marks the run again.
                writers.Upsert(new BsonDocument
                {
                    ["_id"] = run.Id,
                    ["ProcessId"] = Environment.ProcessId,
                    ["Host"] = Environment.MachineName,
                    ["ProcessStartUtc"] = ProcessStartUtc.Value,
                    ["Program"] = "writer",
                    ["Token"] = token,
                    ["ClaimedUtc"] = nowUtc,
                    ["HeartbeatUtc"] = nowUtc,
                });
                return;
            }
            mark["HeartbeatUtc"] = nowUtc;
            writers.Update(mark);
        });
    }

    /// <summary>Lets go of the run: its writer mark is removed when it is still this writer's. Never throws.</summary>
    internal void ReleaseWriter(int runId)
    {
        if (!_claims.Remove(runId, out string? token))
            return;
        LiveTokens.TryRemove(token, out _);
        try
        {
            InOneTransaction(() =>
            {
                var writers = _database.GetCollection(WritersCollection);
                var mark = writers.FindById(runId);
                if (mark is not null && mark["Token"].IsString && mark["Token"].AsString == token)
                    writers.Delete(runId);
            });
        }
        catch (StoreException)
        {
            // A full disk or a removed file: the mark stays, and the stale-writer rule lets the next writer in.
        }
    }

    /// <summary>Lets go of every run this store instance marked; part of <see cref="Dispose"/>. Never throws.</summary>
    internal void ReleaseWriters()
    {
        foreach (int runId in _claims.Keys.ToList())
            ReleaseWriter(runId);
    }

    /// <summary>The run's live writer as one line, or null when none is marked; for readers.</summary>
    internal string? WriterOf(int runId) => Guard(() =>
        _database.CollectionExists(WritersCollection) && _database.GetCollection(WritersCollection).FindById(runId) is { } mark ? Describe(mark) : null);

    // Whether the marked writer is gone, and why: its process is not running on this host (or is another process now
    // that its id was reused), or, on another host, its last heartbeat is older than the bound.
    private static (bool Gone, string Why) Gone(BsonDocument mark, DateTime nowUtc, TimeSpan staleAfter)
    {
        string host = mark["Host"].IsString ? mark["Host"].AsString : "";
        int pid = mark["ProcessId"].IsInt32 ? mark["ProcessId"].AsInt32 : -1;
        DateTime started = mark["ProcessStartUtc"].IsDateTime ? mark["ProcessStartUtc"].AsDateTime.ToUniversalTime() : DateTime.MinValue;
        DateTime heartbeat = mark["HeartbeatUtc"].IsDateTime ? mark["HeartbeatUtc"].AsDateTime.ToUniversalTime() : DateTime.MinValue;
        if (string.Equals(host, Environment.MachineName, StringComparison.Ordinal))
        {
            if (pid == Environment.ProcessId && Math.Abs((started - ProcessStartUtc.Value).TotalSeconds) < 2)
            {
                bool live = mark["Token"].IsString && LiveTokens.ContainsKey(mark["Token"].AsString);
                return (!live, "was dropped by this process without being disposed");
            }
            return (!IsRunning(pid, started), "is no longer running on this host");
        }
        var silent = nowUtc - heartbeat;
        return (silent > staleAfter, $"has not been heard from for {Hours(silent)} (over the {Hours(staleAfter)} bound for a writer on another host)");
    }

    private static bool IsRunning(int pid, DateTime startedUtc)
    {
        if (pid <= 0)
            return false;
        try
        {
            using var process = Process.GetProcessById(pid);
            if (process.HasExited)
                return false;
            try
            {
                // A process id reused by another program since: not the writer.
                return Math.Abs((process.StartTime.ToUniversalTime() - startedUtc).TotalSeconds) < 2;
            }
            catch (Exception e) when (e is InvalidOperationException or System.ComponentModel.Win32Exception or NotSupportedException)
            {
                return true; // running, but its start time cannot be read: taken to be the writer
            }
        }
        catch (Exception e) when (e is ArgumentException or InvalidOperationException)
        {
            return false;
        }
    }

    private static string Describe(BsonDocument mark)
    {
        string program = mark["Program"].IsString ? mark["Program"].AsString : "writer";
        string host = mark["Host"].IsString ? mark["Host"].AsString : "?";
        string pid = mark["ProcessId"].IsInt32 ? mark["ProcessId"].AsInt32.ToString(CultureInfo.InvariantCulture) : "?";
        string started = mark["ClaimedUtc"].IsDateTime ? Utc(mark["ClaimedUtc"].AsDateTime) : "?";
        string heartbeat = mark["HeartbeatUtc"].IsDateTime ? Utc(mark["HeartbeatUtc"].AsDateTime) : "?";
        return $"process {pid} on host '{host}' ({program}, writing since {started}, last heartbeat {heartbeat})";
    }

    private static string Utc(DateTime time) => time.ToUniversalTime().ToString("yyyy-MM-dd HH:mm:ss 'UTC'", CultureInfo.InvariantCulture);

    private static string Hours(TimeSpan span) => span.TotalHours >= 1
        ? span.TotalHours.ToString("0.#", CultureInfo.InvariantCulture) + " h"
        : span.TotalMinutes.ToString("0.#", CultureInfo.InvariantCulture) + " min";
}
