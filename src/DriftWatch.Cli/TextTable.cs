using System.Text;
using DriftWatch.Charts;

namespace DriftWatch.Cli;

/// <summary>A plain-text table for the console: columns padded to their widest cell, every cell made safe with <see cref="DisplayText.Clean"/>.</summary>
internal sealed class TextTable
{
    private readonly string[] _headers;
    private readonly bool[] _rightAligned;
    private readonly List<string[]> _rows = [];

    /// <summary>Creates a table; a header starting with '>' is right-aligned (the '>' is not shown).</summary>
    public TextTable(params string[] headers)
    {
        _rightAligned = headers.Select(h => h.StartsWith('>')).ToArray();
        _headers = headers.Select(h => h.TrimStart('>')).ToArray();
    }

    /// <summary>Adds a row; it must have one cell per header.</summary>
    public void Add(params string[] cells)
    {
        if (cells.Length != _headers.Length)
            throw new ArgumentException($"row has {cells.Length} cells; the table has {_headers.Length} columns", nameof(cells));
        _rows.Add(cells.Select(c => DisplayText.Clean(c)).ToArray());
    }

    /// <summary>Writes the table, header first, two spaces between columns.</summary>
    public void Write(TextWriter output)
    {
        var widths = _headers.Select((h, c) => _rows.Select(r => r[c].Length).Append(h.Length).Max()).ToArray();
        WriteRow(output, _headers, widths);
        WriteRow(output, widths.Select(w => new string('-', w)).ToArray(), widths);
        foreach (var row in _rows)
            WriteRow(output, row, widths);
    }

    private void WriteRow(TextWriter output, string[] cells, int[] widths)
    {
        var line = new StringBuilder();
        for (int c = 0; c < cells.Length; c++)
        {
            if (c > 0)
                line.Append("  ");
            line.Append(_rightAligned[c] ? cells[c].PadLeft(widths[c]) : cells[c].PadRight(widths[c]));
        }
        output.WriteLine(line.ToString().TrimEnd());
    }
}
