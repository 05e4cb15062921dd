using System.Reflection;
using LiteDB.Engine;

namespace DriftWatch.Storage;

/// <summary>
/// Clears the transactions a failed write leaves in a closed LiteDB 5.0.21 engine, so that no finalizer of theirs runs.
/// </summary>
/// <remarks>
/// <para>
/// When the file system refuses a page (full or read-only disk) while LiteDB writes a transaction to its log, the page
/// has already been handed to the cache's readable list. Closing the engine then disposes the transaction, whose
/// <c>Dispose</c> throws "discarded page must be writable" on that page before it marks itself disposed and before
/// <c>GC.SuppressFinalize</c>; LiteDB's close swallows the exception. The transaction stays in the engine's transaction
/// monitor and in the monitor's per-thread slot, which roots it until the thread that wrote exits. Then its finalizer
/// runs the same <c>Dispose</c>, throws again, on the finalizer thread, and the process ends.
/// </para>
/// <para>
/// Nothing public reaches it, so this reads LiteDB's internals by name: the engine's <c>_monitor</c>, the monitor's
/// <c>Transactions</c> and <c>_slot</c>, a transaction's <c>State</c>. For each transaction of a closed engine not
/// disposed, its finalizer is suppressed (its engine, cache and files are closed or garbage already), and the slot is
/// disposed so no thread keeps the dead engine alive. <see cref="Understood"/> says whether this LiteDB has that shape;
/// a test fails when an upgrade changes it.
/// </para>
/// </remarks>
internal static class OrphanedTransactions
{
    private const BindingFlags Instance = BindingFlags.Instance | BindingFlags.Public | BindingFlags.NonPublic;

    private static readonly FieldInfo? MonitorField = typeof(LiteEngine).GetField("_monitor", Instance);
    private static readonly PropertyInfo? TransactionsProperty = MonitorField?.FieldType.GetProperty("Transactions", Instance);
    private static readonly FieldInfo? SlotField = MonitorField?.FieldType.GetField("_slot", Instance);
    private static readonly Type? TransactionType = typeof(LiteEngine).Assembly.GetType("LiteDB.Engine.TransactionService");
    private static readonly PropertyInfo? StateProperty = TransactionType?.GetProperty("State", Instance);
    private static int _cleared;

    /// <summary>Whether this LiteDB has the internals the clearing reads.</summary>
    public static bool Understood =>
        TransactionsProperty is not null
        && SlotField is not null && typeof(IDisposable).IsAssignableFrom(SlotField.FieldType)
        && StateProperty is not null && StateProperty.PropertyType.IsEnum && Enum.IsDefined(StateProperty.PropertyType, "Disposed");

    /// <summary>Transactions cleared in this process so far (for tests and diagnostics).</summary>
    public static int Cleared => Volatile.Read(ref _cleared);

    /// <summary>Clears what a failed write left in <paramref name="engine"/>; call only after the engine is disposed.</summary>
    /// <returns>The number of transactions whose finalizer was suppressed.</returns>
    public static int Clear(LiteEngine engine)
    {
        ArgumentNullException.ThrowIfNull(engine);
        if (!Understood || MonitorField!.GetValue(engine) is not { } monitor)
            return 0;
        var left = (TransactionsProperty!.GetValue(monitor) as System.Collections.IEnumerable)?.Cast<object>().ToList() ?? [];
        if (left.Count == 0)
            return 0; // a clean close empties the monitor
        int cleared = 0;
        foreach (object transaction in left)
        {
            if (StateProperty!.GetValue(transaction)?.ToString() == "Disposed")
                continue;
            GC.SuppressFinalize(transaction);
            cleared++;
        }
        // The slot is a ThreadLocal; disposing it drops every thread's reference to the engine's transactions.
        (SlotField!.GetValue(monitor) as IDisposable)?.Dispose();
        Interlocked.Add(ref _cleared, cleared);
        return cleared;
    }
}
