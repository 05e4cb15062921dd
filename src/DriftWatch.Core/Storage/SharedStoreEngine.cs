using System.Security.Cryptography;
using System.Text;
using LiteDB;
using LiteDB.Engine;

namespace DriftWatch.Storage;

/// <summary>
/// LiteDB's shared mode, done by DriftWatch so that it holds each engine it opens: every operation opens the file's
/// engine under a named mutex and closes it afterwards (one explicit transaction keeps it open until commit or
/// rollback), and once an engine is closed, whatever a failed write left in it is cleared (<see cref="OrphanedTransactions"/>).
/// </summary>
/// <remarks>
/// The mutex has the name LiteDB's own shared mode gives it, so DriftWatch and any other LiteDB shared-mode reader of
/// the same file still take turns. Like LiteDB's, it serialises the threads of one process as well.
/// </remarks>
internal sealed class SharedStoreEngine : ILiteEngine
{
    private readonly EngineSettings _settings;
    private readonly Mutex _mutex;
    private LiteEngine? _engine;
    private bool _transactionRunning;
    private bool _disposed;

    public SharedStoreEngine(string fullPath, bool readOnly)
    {
        // A new file compares strings ordinally (names, keys, every query): LiteDB's default is the writing process's
        // culture, ignoring case, which made Night-7 and night-7 one run and ordered the name index by whatever culture
        // library (ICU or none) that process had. The collation is fixed when the file is created; an existing file keeps
        // its own (LiteDB refuses to open a file whose collation differs from one given in the settings).
        _settings = new EngineSettings { Filename = fullPath, ReadOnly = readOnly, Collation = File.Exists(fullPath) ? null : OrdinalCollation };
        _mutex = new Mutex(initiallyOwned: false, MutexName(fullPath));
    }

    /// <summary>The collation of every store file this version creates: ordinal, case-sensitive, the same under any culture.</summary>
    internal static Collation OrdinalCollation { get; } = new(System.Globalization.CultureInfo.InvariantCulture.LCID, System.Globalization.CompareOptions.Ordinal);

    /// <summary>The name LiteDB 5's shared mode gives the mutex of a file: its full path, lower case, SHA-1 in upper-case hex.</summary>
    internal static string MutexName(string fullPath) =>
        "Global\\" + Convert.ToHexString(SHA1.HashData(Encoding.UTF8.GetBytes(System.IO.Path.GetFullPath(fullPath).ToLower(System.Globalization.CultureInfo.CurrentCulture)))) + ".Mutex";

    public bool BeginTrans()
    {
        Open();
        try
        {
            bool began = _engine!.BeginTrans();
            if (began)
                _transactionRunning = true;
            else
                _mutex.ReleaseMutex(); // already inside this thread's transaction: give back this call's turn only
            return began;
        }
        catch
        {
            Close();
            throw;
        }
    }

    public bool Commit()
    {
        if (_engine is null)
            return false;
        try
        {
            return _engine.Commit();
        }
        finally
        {
            _transactionRunning = false;
            Close();
        }
    }

    public bool Rollback()
    {
        if (_engine is null)
            return false;
        try
        {
            return _engine.Rollback();
        }
        finally
        {
            _transactionRunning = false;
            Close();
        }
    }

    public IBsonDataReader Query(string collection, Query query)
    {
        Open();
        try
        {
            return new SharedDataReader(_engine!.Query(collection, query), Close);
        }
        catch
        {
            Close();
            throw;
        }
    }

    public int Checkpoint() => Run(e => e.Checkpoint());

    public long Rebuild(RebuildOptions options) => Run(e => e.Rebuild(options));

    public int Insert(string collection, IEnumerable<BsonDocument> docs, BsonAutoId autoId) => Run(e => e.Insert(collection, docs, autoId));

    public int Update(string collection, IEnumerable<BsonDocument> docs) => Run(e => e.Update(collection, docs));

    public int UpdateMany(string collection, BsonExpression transform, BsonExpression predicate) => Run(e => e.UpdateMany(collection, transform, predicate));

    public int Upsert(string collection, IEnumerable<BsonDocument> docs, BsonAutoId autoId) => Run(e => e.Upsert(collection, docs, autoId));

    public int Delete(string collection, IEnumerable<BsonValue> ids) => Run(e => e.Delete(collection, ids));

    public int DeleteMany(string collection, BsonExpression predicate) => Run(e => e.DeleteMany(collection, predicate));

    public bool DropCollection(string name) => Run(e => e.DropCollection(name));

    public bool RenameCollection(string name, string newName) => Run(e => e.RenameCollection(name, newName));

    public bool EnsureIndex(string collection, string name, BsonExpression expression, bool unique) => Run(e => e.EnsureIndex(collection, name, expression, unique));

    public bool DropIndex(string collection, string name) => Run(e => e.DropIndex(collection, name));

    public BsonValue Pragma(string name) => Run(e => e.Pragma(name));

    public bool Pragma(string name, BsonValue value) => Run(e => e.Pragma(name, value));

    public void Dispose()
    {
        if (_disposed)
            return;
        _disposed = true;
        if (_engine is not null)
        {
            // Disposed inside a transaction that was neither committed nor rolled back: the transaction is dropped.
            _transactionRunning = false;
            try
            {
                CloseEngine();
            }
            finally
            {
                try
                {
                    _mutex.ReleaseMutex();
                }
                catch (ApplicationException)
                {
                    // Disposed on another thread than the one that took the mutex; that thread's exit frees it.
                }
            }
        }
        _mutex.Dispose();
    }

    private T Run<T>(Func<LiteEngine, T> operation)
    {
        Open();
        try
        {
            return operation(_engine!);
        }
        finally
        {
            Close();
        }
    }

    private void Open()
    {
        ObjectDisposedException.ThrowIf(_disposed, this);
        try
        {
            _mutex.WaitOne();
        }
        catch (AbandonedMutexException)
        {
            // A process killed while holding the file: the mutex is ours now, and LiteDB's log makes the file whole on open.
        }
        if (_transactionRunning || _engine is not null)
            return;
        try
        {
            _engine = new LiteEngine(_settings);
        }
        catch
        {
            _mutex.ReleaseMutex();
            throw;
        }
    }

    private void Close()
    {
        try
        {
            if (!_transactionRunning && _engine is not null)
                CloseEngine();
        }
        finally
        {
            _mutex.ReleaseMutex();
        }
    }

    private void CloseEngine()
    {
        var engine = _engine!;
        _engine = null;
        try
        {
            engine.Dispose();
        }
        finally
        {
            OrphanedTransactions.Clear(engine);
        }
    }
}
