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
}
