using System.Globalization;
using System.Text;
using DriftWatch.Charts;
using DriftWatch.Probing;
using DriftWatch.Storage;

namespace DriftWatch.Cli;

/// <summary>The labelled rows a pruning what-if is measured on: a CSV file, or the held-out half of the run's probe set.</summary>
internal static class EvaluationRows
{
    /// <summary>
    /// Reads a CSV whose header names every dense and categorical feature of <paramref name="run"/> and <c>label</c> (any
    /// order; other columns are ignored): dense values as numbers, categorical ids as whole numbers, labels 0 or 1.
    /// </summary>
    /// <exception cref="DriftWatchException">A missing file or column, or a cell that is not what its column needs; the message names the line.</exception>
    public static ProbeRows Read(string path, RunDocument run)
    {
        string full = Path.GetFullPath(path);
        string shown = DisplayText.Clean(full);
        if (!File.Exists(full))
            throw new DriftWatchException($"--data '{shown}' does not exist; pass a CSV of labelled rows (header: the run's features and label)");
        var lines = File.ReadAllLines(full, Encoding.UTF8).Where(l => l.Length > 0).ToList();
        var dense = run.Features.Where(f => f.Kind == "Dense").Select(f => f.Name).ToList();
        var categorical = run.Features.Where(f => f.Kind == "Categorical").Select(f => f.Name).ToList();
        if (lines.Count < 2)
            throw new DriftWatchException($"--data '{shown}' has no rows under its header");
        var header = RunFolder.SplitCsv(lines[0]);
        int Column(string name) => header.IndexOf(name) is int i and >= 0
            ? i
            : throw new DriftWatchException($"--data '{shown}' has no column '{DisplayText.Clean(name)}'; its header must name every feature of the run ({DisplayText.Clean(string.Join(", ", dense.Concat(categorical)), 300)}) and label");
        var denseColumns = dense.Select(Column).ToArray();
        var categoricalColumns = categorical.Select(Column).ToArray();
        int labelColumn = Column("label");
        int rows = lines.Count - 1;
        var d = new float[rows * dense.Count];
        var c = new long[rows * categorical.Count];
        var y = new float[rows];
        for (int r = 0; r < rows; r++)
        {
            var cells = RunFolder.SplitCsv(lines[r + 1]);
            string where = $"--data '{shown}', line {r + 2}";
            if (cells.Count != header.Count)
                throw new DriftWatchException($"{where}: {cells.Count} values; the header has {header.Count}");
            for (int j = 0; j < dense.Count; j++)
            {
                string text = cells[denseColumns[j]];
                d[r * dense.Count + j] = float.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out float v) && float.IsFinite(v)
                    ? v
                    : throw new DriftWatchException($"{where}: '{DisplayText.Clean(text, 40)}' in column '{DisplayText.Clean(dense[j])}' is not a finite number");
            }
            for (int j = 0; j < categorical.Count; j++)
            {
                string text = cells[categoricalColumns[j]];
                c[r * categorical.Count + j] = long.TryParse(text, NumberStyles.None, CultureInfo.InvariantCulture, out long id)
                    ? id
                    : throw new DriftWatchException($"{where}: id '{DisplayText.Clean(text, 40)}' of '{DisplayText.Clean(categorical[j])}' must be a whole number of at least 0");
            }
            string label = cells[labelColumn];
            y[r] = float.TryParse(label, NumberStyles.Float, CultureInfo.InvariantCulture, out float l) && l is 0f or 1f
                ? l
                : throw new DriftWatchException($"{where}: label '{DisplayText.Clean(label, 40)}' must be 0 or 1");
        }
        return new ProbeRows(d, dense.Count, c, categorical.Count, y);
    }

    /// <summary>The held-out half of the run's stored probe set, with its labels.</summary>
    /// <exception cref="DriftWatchException">The probe set was stored without labels.</exception>
    public static ProbeRows HeldOut(RunDocument run)
    {
        var probe = DriftWatch.Attribution.Reattribution.ProbeOf(run);
        if (probe.Rows.Labels is null)
            throw new DriftWatchException($"run '{DisplayText.Clean(run.Name)}' stored its probe rows without labels; pass --data FILE.csv with labelled rows");
        return probe.Rows.Take(Enumerable.Range(0, probe.HeldOutCount).ToArray());
    }
}
