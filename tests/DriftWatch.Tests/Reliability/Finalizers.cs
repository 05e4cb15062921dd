using System.Runtime.ExceptionServices;

namespace DriftWatch.Tests.Reliability;

/// <summary>
/// Runs pending finalizers now. A failure inside LiteDB can leave an object whose finalizer throws, which ends the
/// whole process at some later garbage collection; the tests that provoke failures call this, so such a crash shows in
/// the test that caused it, not at random in another.
/// </summary>
internal static class Finalizers
{
    public static void RunNow()
    {
        for (int i = 0; i < 3; i++)
        {
            GC.Collect();
            GC.WaitForPendingFinalizers();
        }
    }

    /// <summary>
    /// Runs <paramref name="work"/> on a thread of its own and waits until that thread has ended. LiteDB keeps a thread's
    /// transaction in a per-thread slot, so what a failed write leaves behind becomes garbage (and its finalizer runs)
    /// only once the writing thread ends: a training loop on a worker thread, or a pool thread retired by the runtime.
    /// </summary>
    public static T OnAThreadThatEnds<T>(Func<T> work)
    {
        T result = default!;
        ExceptionDispatchInfo? failure = null;
        var thread = new Thread(() =>
        {
            try
            {
                result = work();
            }
            catch (Exception e)
            {
                failure = ExceptionDispatchInfo.Capture(e);
            }
        });
        thread.Start();
        thread.Join();
        failure?.Throw();
        return result;
    }
}
