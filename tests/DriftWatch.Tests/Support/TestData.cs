using DriftWatch.Probing;

namespace DriftWatch.Tests.Support;

/// <summary>Builds random raw rows for tests (seeded); invented data, used only to exercise mechanics.</summary>
internal sealed class RowsBuilder
{
    private int _rows = 40;
    private int _dense = 3;
    private int _levels = 5;
    private int _seed = 7;

    public RowsBuilder WithRows(int rows)
    {
        _rows = rows;
        return this;
    }

    public RowsBuilder WithDense(int dense)
    {
        _dense = dense;
        return this;
    }

    public RowsBuilder WithSeed(int seed)
    {
        _seed = seed;
        return this;
    }

    public ProbeRows Build()
    {
        var random = new Random(_seed);
        var dense = new float[_rows * _dense];
        for (int i = 0; i < dense.Length; i++)
            dense[i] = (float)(random.NextDouble() * 4 - 2);
        var cats = new long[_rows];
        var labels = new float[_rows];
        for (int r = 0; r < _rows; r++)
        {
            cats[r] = random.Next(_levels);
            labels[r] = dense[r * _dense] + 0.3 * cats[r] > 0.5 ? 1f : 0f;
        }
        return new ProbeRows(dense, _dense, cats, 1, labels);
    }
}

/// <summary>The small probe set most monitor tests share: 12 + 12 rows drawn from two seeded sets of 60.</summary>
internal static class TestProbes
{
    /// <summary>Held-out rows from seed 1, training rows from seed 2, <paramref name="perHalf"/> of each, selection seed 4.</summary>
    public static ProbeSet Small(int perHalf = 12) => ProbeSet.Select(
        new RowsBuilder().WithRows(60).WithSeed(1).Build(),
        new RowsBuilder().WithRows(60).WithSeed(2).Build(),
        perHalf,
        seed: 4);
}

/// <summary>A temporary folder deleted at dispose.</summary>
internal sealed class TempFolder : IDisposable
{
    public TempFolder()
    {
        Path = System.IO.Path.Combine(System.IO.Path.GetTempPath(), "driftwatch-tests-" + Guid.NewGuid().ToString("N")[..12]);
        Directory.CreateDirectory(Path);
    }

    public string Path { get; }

    public string File(string name) => System.IO.Path.Combine(Path, name);

    public void Dispose()
    {
        try
        {
            Directory.Delete(Path, recursive: true);
        }
        catch (IOException)
        {
        }
    }
}
